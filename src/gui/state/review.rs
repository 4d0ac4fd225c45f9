//! Exporting the worklist (with its control rows and key), reading a reviewed one, and
//! writing the data with the reviewed labels.

use super::*;
use crate::io::merged_columnar::check_merged_target;
use crate::io::review::write_merged;
use crate::io::worklist::{key_path, write_worklist_files, Extras, Item};
use crate::io::{check_not_input, write_atomic};
use crate::noise::scores::RowScore;
use crate::workflow::ranking::Filter;
use crate::workflow::review::read_reviewed;
use crate::workflow::worklist::{listed_head, split_budget, with_control};

impl AppState {
    pub(super) fn export_worklist(&mut self, path: PathBuf) {
        let Some(data) = self.data.clone() else {
            return self.say(Level::Error, "load a data table first");
        };
        if !self.ranking.as_ref().is_some_and(|r| r.is_complete()) {
            return self.say(
                Level::Error,
                "the suspects are still being ranked; export again in a moment",
            );
        }
        let Some(ranking) = self.ranking.clone() else {
            return;
        };
        let filter = self.filter();
        let (listed, control) = self.worklist_head(&ranking);
        let settings = &self.session.settings;
        let inputs = self.input_paths();
        let (kind, seed) = (settings.score, settings.seed);
        let of_row = self.of_row.clone();
        let job = self.next_save();
        self.spawn_on_data(job, move |_| {
            let pick = Pick {
                control,
                seed,
                filter: &filter,
                of_row: of_row.as_deref(),
            };
            let items = ranked_with_control(&ranking, &data, &listed, &pick);
            let refs: Vec<&Path> = inputs.iter().map(PathBuf::as_path).collect();
            for target in [&path, &key_path(&path)] {
                check_not_input(target, &refs).map_err(fail)?;
            }
            let key = write_worklist_files(&path, &data, kind, &items, Extras::default())
                .map_err(fail)?;
            let drawn = items.len() - listed.len();
            Ok(JobOutput::Saved(match key {
                None => format!(
                    "wrote {} ({} suspects, ranked)",
                    path.display(),
                    listed.len()
                ),
                Some(key) => format!(
                    "wrote {} ({} suspects and {drawn} control rows, shuffled) and its key {}: \
                     keep the key from the reviewers",
                    path.display(),
                    listed.len(),
                    key.display()
                ),
            }))
        });
    }

    /// The worklist's listed suspects (the budget's share of the filtered rows, in rank
    /// order, each with its 1-based rank) and how many control rows go with them.
    pub(super) fn worklist_head(&self, ranking: &Ranking) -> (Vec<(RowScore, usize)>, usize) {
        let settings = &self.session.settings;
        let (suspects, control) = split_budget(settings.budget, settings.control);
        (listed_head(ranking, &self.visible, suspects), control)
    }

    /// The suspects a worklist exported now would list (none before a ranking): what the
    /// Overview's and the yield plot's expected findings are summed over.
    pub fn worklist_listed(&self) -> Vec<(RowScore, usize)> {
        self.ranking
            .as_ref()
            .map(|ranking| self.worklist_head(ranking).0)
            .unwrap_or_default()
    }

    pub(super) fn import_review(&mut self, path: PathBuf) {
        let Some(data) = self.data.clone() else {
            return self.say(Level::Error, "load a data table first");
        };
        self.spawn_on_data(JobKind::Review, move |_| {
            let read = read_reviewed(data.as_ref(), &path, None).map_err(fail)?;
            let read = ReviewRead {
                path,
                review: Arc::new(read.review),
                summary: read.summary,
            };
            Ok(JobOutput::Reviewed(read))
        });
    }

    pub(super) fn save_merged(&mut self, path: PathBuf) {
        let (Some(data), Some(review)) = (self.data.clone(), self.review.clone()) else {
            return self.say(Level::Error, "read a reviewed worklist first");
        };
        let inputs = self.input_paths();
        let mut all_inputs = inputs;
        all_inputs.push(review.path.clone());
        let delimiter = table_options(&self.session.roles)
            .map(|o| o.delimiter_for(&data.path))
            .unwrap_or(b',');
        let target = path.clone();
        let kind = self.next_save();
        self.spawn_on_data(kind, move |_| {
            let inputs: Vec<&Path> = all_inputs.iter().map(PathBuf::as_path).collect();
            check_not_input(&target, &inputs).map_err(fail)?;
            check_merged_target(data.as_ref(), &target).map_err(fail)?;
            write_atomic(&target, |w| {
                write_merged(w, data.as_ref(), delimiter, &review.review)
            })
            .map_err(fail)?;
            Ok(JobOutput::Merged(target))
        });
    }
}

/// How a worklist's control rows are drawn: how many, the seed, and the rows the
/// filter's class and source choices allow (`of_row`: every row's source).
pub(super) struct Pick<'a> {
    pub(super) control: usize,
    pub(super) seed: u64,
    pub(super) filter: &'a Filter,
    pub(super) of_row: Option<&'a [u32]>,
}

/// The listed rows of the app's worklist plus control rows drawn from the rows the
/// filter's class and source choices allow, with their verdicts and ranks from the
/// ranking.
pub(super) fn ranked_with_control(
    ranking: &Ranking,
    data: &Dataset,
    listed: &[(RowScore, usize)],
    pick: &Pick,
) -> Vec<Item> {
    let mut position = vec![0usize; ranking.ranked.len()];
    for (i, s) in ranking.ranked.iter().enumerate() {
        position[s.row] = i;
    }
    with_control(
        listed,
        data.rows(),
        pick.control,
        pick.seed,
        |r| {
            let filter = pick.filter;
            filter.observed.is_none_or(|c| data.labels[r] == c)
                && filter.keeps_source(pick.of_row, r)
        },
        |rows| rows.iter().map(|&r| ranking.ranked[position[r]]).collect(),
        |rows| rows.iter().map(|&r| position[r] + 1).collect(),
    )
}
