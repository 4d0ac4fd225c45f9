//! From the cells as read to a checked [`Dataset`]: features chosen, classes in natural
//! order, ids checked unique, class counts checked.

use rustc_hash::FxHashMap as HashMap;
use std::path::Path;

use ndarray::Array2;
use rayon::prelude::*;

use super::annotations::Annotations;
use super::natural::natural_cmp;
use super::roles::ColumnPlan;
use super::sources::LabelSources;
use super::table::{Dataset, IgnoredColumn, MissingCount, StringColumn};
use crate::error::{Error, Location, Problem, Result};
use crate::io::table_chunk::NONE;
use crate::io::table_merge::Merged;

/// The cells of one table and the file they came from.
pub(super) struct Assembly<'a> {
    pub(super) path: &'a Path,
    pub(super) cells: Merged,
}

impl Assembly<'_> {
    pub(super) fn finish(mut self, plan: ColumnPlan) -> Result<Dataset> {
        if self.cells.rows == 0 {
            return Err(self.whole_file(Problem::HeaderOnly));
        }
        let (kept, ignored) = self.choose_features(&plan)?;
        let mut warnings = Vec::new();
        let missing = self.missing_counts(&plan, &kept);
        let values = compact(
            std::mem::take(&mut self.cells.values),
            self.cells.rows,
            plan.numeric.len(),
            &kept,
        );
        let features = Array2::from_shape_vec((self.cells.rows, kept.len()), values)
            .map_err(|e| Error::Internal(format!("feature array shape: {e}")))?;
        let (classes, order) = self.class_order();
        let annotations = (!plan.annotators.is_empty()).then(|| {
            let columns = plan
                .annotators
                .iter()
                .map(|&f| plan.header[f].clone())
                .collect();
            Annotations::from_codes(columns, &self.cells.annotations, &order)
        });
        let labels: Vec<usize> = match &annotations {
            // Every row has a label from some annotator (the reader checked).
            Some(a) => a
                .majority(classes.len())
                .into_iter()
                .map(|l| l.unwrap_or(0))
                .collect(),
            None => self
                .cells
                .labels
                .iter()
                .map(|&c| order[c as usize])
                .collect(),
        };
        let trusted = plan.trusted.map(|_| {
            self.cells
                .trusted
                .iter()
                .map(|&c| (c != NONE).then(|| order[c as usize]))
                .collect::<Vec<_>>()
        });
        let trusted_origins = plan
            .origin
            .filter(|_| trusted.is_some())
            .map(|_| std::mem::take(&mut self.cells.origins));
        let sources = plan.source.map(|field| {
            let (sources, blank) = LabelSources::from_codes(
                plan.header[field].clone(),
                std::mem::take(&mut self.cells.source_names),
                &self.cells.sources,
            );
            warnings.extend(blank);
            sources
        });
        let plan_labeled = plan.label.is_some() || annotations.is_some();
        let ids = plan.id.map(|_| std::mem::take(&mut self.cells.ids));
        if let Some(ids) = &ids {
            self.check_unique_ids(ids, &plan)?;
        }
        let dataset = Dataset {
            path: self.path.to_path_buf(),
            label_column: plan.label.map(|l| plan.header[l].clone()),
            id_column: plan.id.map(|i| plan.header[i].clone()),
            trusted_column: plan.trusted.map(|i| plan.header[i].clone()),
            origin_column: plan.origin.map(|i| plan.header[i].clone()),
            feature_names: kept
                .iter()
                .map(|&s| plan.header[plan.numeric[s]].clone())
                .collect(),
            header: plan.header,
            features,
            classes,
            labels,
            trusted,
            trusted_origins,
            sources,
            annotations,
            ids,
            ignored,
            missing,
            warnings: Vec::new(),
        };
        if plan_labeled {
            check_classes(self.path, &dataset, &mut warnings)?;
        }
        Ok(Dataset {
            warnings,
            ..dataset
        })
    }

    /// Decides which numeric slots are features, and reports the others.
    fn choose_features(&self, plan: &ColumnPlan) -> Result<(Vec<usize>, Vec<IgnoredColumn>)> {
        let mut kept = Vec::new();
        let mut ignored = Vec::new();
        for (slot, stats) in self.cells.slots.iter().enumerate() {
            let name = &plan.header[plan.numeric[slot]];
            if plan.explicit {
                kept.push(slot);
            } else if let Some(found) = &stats.wrong_type {
                let reason = format!("not numeric (holds {found})");
                ignored.push(IgnoredColumn {
                    name: name.clone(),
                    reason,
                });
            } else if let Some((at, text)) = &stats.first_bad {
                let reason = format!("not numeric ('{text}' on {})", self.cells.places.words(*at));
                ignored.push(IgnoredColumn {
                    name: name.clone(),
                    reason,
                });
            } else if stats.values == 0 {
                ignored.push(IgnoredColumn {
                    name: name.clone(),
                    reason: "no values".into(),
                });
            } else {
                kept.push(slot);
            }
        }
        if plan.explicit {
            let mut numeric = vec![false; plan.header.len()];
            plan.numeric.iter().for_each(|&i| numeric[i] = true);
            for (i, name) in plan.header.iter().enumerate() {
                let used = numeric[i]
                    || Some(i) == plan.label
                    || Some(i) == plan.id
                    || Some(i) == plan.trusted
                    || Some(i) == plan.source
                    || plan.annotators.contains(&i);
                if !used {
                    ignored.push(IgnoredColumn {
                        name: name.clone(),
                        reason: "not in --features".into(),
                    });
                }
            }
        }
        self.check_feature_cells(plan, &kept)?;
        if kept.is_empty() {
            let detail = if ignored.is_empty() {
                "; the table has only role columns".to_string()
            } else {
                format!(
                    "; ignored: {}",
                    ignored
                        .iter()
                        .map(|c| format!("{} ({})", c.name, c.reason))
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            };
            return Err(self.whole_file(Problem::NoFeatures { detail }));
        }
        Ok((kept, ignored))
    }

    /// The earliest bad cell among the features, if any, as an error.
    fn check_feature_cells(&self, plan: &ColumnPlan, kept: &[usize]) -> Result<()> {
        for &slot in kept {
            if let Some(found) = &self.cells.slots[slot].wrong_type {
                let field = plan.numeric[slot];
                let problem = Problem::ColumnType {
                    found: found.clone(),
                    expected: "features must be integer or floating-point numbers".into(),
                };
                let location = Location::file(self.path).at_column(field, &plan.header[field]);
                return Err(Error::input(location, problem));
            }
        }
        let mut worst: Option<(u64, usize, Problem)> = None;
        for &slot in kept {
            let stats = &self.cells.slots[slot];
            let candidates = [
                stats
                    .first_bad
                    .clone()
                    .map(|(l, value)| (l, Problem::NotNumber { value })),
                stats
                    .first_nonfinite
                    .clone()
                    .map(|(l, value)| (l, Problem::NotFinite { value })),
                stats
                    .first_missing
                    .map(|l| (l, self.cells.places.missing_values(stats.missing))),
            ];
            for (line, problem) in candidates.into_iter().flatten() {
                if worst.as_ref().is_none_or(|(l, _, _)| line < *l) {
                    worst = Some((line, slot, problem));
                }
            }
        }
        match worst {
            None => Ok(()),
            Some((line, slot, problem)) => {
                let field = plan.numeric[slot];
                let location = self.cells.places.locate(self.path, line);
                Err(Error::input(
                    location.at_column(field, &plan.header[field]),
                    problem,
                ))
            }
        }
    }

    fn missing_counts(&self, plan: &ColumnPlan, kept: &[usize]) -> Vec<MissingCount> {
        let mut missing = Vec::new();
        if let Some(field) = plan.trusted {
            let count = self.cells.trusted.iter().filter(|&&c| c == NONE).count();
            missing.push(MissingCount {
                column: plan.header[field].clone(),
                count,
            });
        }
        let mut is_kept = vec![false; self.cells.slots.len()];
        kept.iter().for_each(|&s| is_kept[s] = true);
        for (slot, stats) in self.cells.slots.iter().enumerate() {
            if !is_kept[slot] && stats.missing > 0 {
                missing.push(MissingCount {
                    column: plan.header[plan.numeric[slot]].clone(),
                    count: stats.missing,
                });
            }
        }
        missing.retain(|m| m.count > 0);
        missing
    }

    /// Natural-sorted class names and the map from load order to sorted position.
    fn class_order(&self) -> (Vec<String>, Vec<usize>) {
        let mut sorted: Vec<usize> = (0..self.cells.names.len()).collect();
        sorted.sort_by(|&a, &b| natural_cmp(&self.cells.names[a], &self.cells.names[b]));
        let mut order = vec![0; self.cells.names.len()];
        for (position, &code) in sorted.iter().enumerate() {
            order[code] = position;
        }
        (
            sorted
                .iter()
                .map(|&c| self.cells.names[c].clone())
                .collect(),
            order,
        )
    }

    fn check_unique_ids(&self, ids: &StringColumn, plan: &ColumnPlan) -> Result<()> {
        let Some((row, first)) = first_duplicate(ids) else {
            return Ok(());
        };
        let field = plan.id.unwrap_or(0);
        let places = &self.cells.places;
        let location = places
            .locate(self.path, self.cells.row_lines[row])
            .at_column(field, &plan.header[field]);
        let problem = Problem::DuplicateId {
            id: crate::error::shorten(ids.get(row)),
            first: places.words(self.cells.row_lines[first]),
        };
        Err(Error::input(location, problem))
    }

    fn whole_file(&self, problem: Problem) -> Error {
        Error::input(Location::file(self.path), problem)
    }
}

/// Shards of the duplicate-id check: ids are split by hash, so equal ids meet in one
/// shard, and the shards are checked on every core with tables small enough for cache.
const ID_SHARDS: usize = 16;

/// The first row (in file order) whose id appeared before, with that earlier row: the
/// row a serial scan with one hash table would report. Each shard finds its own first
/// repeat; equal ids share a shard, so the smallest of those is the first overall.
fn first_duplicate(ids: &StringColumn) -> Option<(usize, usize)> {
    use std::hash::BuildHasher;
    let hasher = rustc_hash::FxBuildHasher;
    let shard_of: Vec<u8> = (0..ids.len())
        .into_par_iter()
        .with_min_len(4096)
        .map(|row| (hasher.hash_one(ids.get(row)) % ID_SHARDS as u64) as u8)
        .collect();
    (0..ID_SHARDS)
        .into_par_iter()
        .filter_map(|shard| {
            let mut seen: HashMap<&str, usize> =
                HashMap::with_capacity_and_hasher(ids.len() / ID_SHARDS + 16, Default::default());
            for (row, &s) in shard_of.iter().enumerate() {
                if s as usize == shard {
                    if let Some(first) = seen.insert(ids.get(row), row) {
                        return Some((row, first));
                    }
                }
            }
            None
        })
        .min()
}

/// Keeps the columns `kept` (sorted slot indices) of a row-major `rows × width` buffer,
/// in place: every kept value moves to an index no larger than its old one.
fn compact(mut values: Vec<f64>, rows: usize, width: usize, kept: &[usize]) -> Vec<f64> {
    if kept.len() == width {
        return values;
    }
    let new_width = kept.len();
    for row in 0..rows {
        for (k, &slot) in kept.iter().enumerate() {
            values[row * new_width + k] = values[row * width + slot];
        }
    }
    values.truncate(rows * new_width);
    values.shrink_to_fit();
    values
}

fn check_classes(path: &Path, data: &Dataset, warnings: &mut Vec<String>) -> Result<()> {
    let counts = data.class_counts();
    let observed: Vec<&str> = data
        .classes
        .iter()
        .zip(&counts)
        .filter(|(_, &n)| n > 0)
        .map(|(c, _)| c.as_str())
        .collect();
    if data.classes.len() < 2 {
        let problem = Problem::TooFewClasses {
            found: data.classes.len(),
            names: data.classes.join(", "),
        };
        return Err(Error::input(Location::file(path), problem));
    }
    for (class, &count) in data.classes.iter().zip(&counts) {
        match count {
            0 => warnings.push(format!(
                "class '{class}' occurs only as a trusted label, never as an observed one"
            )),
            1 => warnings.push(format!(
                "class '{class}' has a single row; estimates for it will be unreliable"
            )),
            _ => {}
        }
    }
    if observed.len() < 2 {
        warnings.push(format!(
            "only one observed class ({}); the flip matrix cannot be estimated",
            observed.join(", ")
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn compact_keeps_selected_columns_in_place() {
        let v = vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
        assert_eq!(compact(v, 2, 3, &[0, 2]), vec![1.0, 3.0, 4.0, 6.0]);
    }
}
