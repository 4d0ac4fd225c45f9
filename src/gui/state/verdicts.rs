//! Reviewing inside the app: verdicts (given, undone, redone), review rounds with their
//! random control rows, the trusted labels the verdicts make (the estimate, the
//! bootstrap and the ranking follow them), writing them as a reviewed worklist, and the
//! suspects table's order.

use rayon::iter::{IntoParallelRefIterator, ParallelIterator};
use rayon::slice::ParallelSliceMut;

use super::*;
use crate::data::origin::Origin;
use crate::data::typical::typical_values;
use crate::gui::verdict_book::RoundRow;
use crate::io::check_not_input;
use crate::io::review::{Key, KeyRow, Verdict};
use crate::io::session::MatrixOrigin;
use crate::io::worklist::{write_worklist_files, Extras, Item, Slice};
use crate::noise::scores::RowScore;
use crate::workflow::review::{summarise, with_verdicts};

/// A column the suspects table can be ordered by.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum SuspectColumn {
    /// Rank (the score's order).
    Rank,
    /// Data row number.
    Row,
    /// Row id.
    Id,
    /// Label source.
    Source,
    /// Observed label.
    Observed,
    /// Suggested class.
    Suggested,
    /// Second choice.
    SecondChoice,
    /// Its probability.
    SecondChoiceProb,
    /// The verdict given in the app (rows with one first).
    Verdict,
}

/// An order of the suspects table: a column, descending or not. Ties keep rank order.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct SuspectSort {
    /// The column.
    pub column: SuspectColumn,
    /// Largest first.
    pub descending: bool,
}

impl AppState {
    /// Verdicts given in the app.
    pub fn verdicts(&self) -> &VerdictBook {
        &self.verdicts
    }

    /// The review round being worked through, if one is under way.
    pub fn round(&self) -> Option<&Round> {
        self.round.as_ref().filter(|_| self.round_open)
    }

    /// Rows of the round under way that have a verdict, and its rows.
    pub fn round_progress(&self) -> Option<(usize, usize)> {
        let round = self.round()?;
        let judged = round
            .rows
            .iter()
            .filter(|r| self.verdicts.get(r.row).is_some())
            .count();
        Some((judged, round.rows.len()))
    }

    /// Ends the round under way. Its rows stay known, so its control rows keep
    /// measuring what the list missed and its verdicts are written with its key.
    pub(super) fn end_round(&mut self) {
        self.round_open = false;
    }

    /// What the verdicts measured so far (precision of the reviewed suspects, the error
    /// rate of the control rows).
    pub fn verdict_summary(&self) -> Option<&ReviewSummary> {
        self.verdict_summary.as_ref()
    }

    /// Each class's typical feature values.
    pub fn typical(&self) -> Option<&Arc<Typical>> {
        self.typical.as_ref()
    }

    /// The suspects table's order, when not by rank.
    pub fn sort(&self) -> Option<SuspectSort> {
        self.sort
    }

    /// Positions in the ranking the suspects table shows, in the table's order (rank
    /// order unless sorted by a column).
    pub fn table_rows(&self) -> &[u32] {
        if self.sort.is_some() {
            &self.sorted
        } else {
            &self.visible
        }
    }

    /// `row`'s position in the ranking (0 = most suspect), when it is ranked.
    pub fn ranking_position(&self, row: usize) -> Option<usize> {
        let p = *self.position_of.get(row)?;
        (p != u32::MAX).then_some(p as usize)
    }

    /// `row`'s line in the suspects table (0 = the top line), when it passes the filters.
    pub fn table_line(&self, row: usize) -> Option<usize> {
        let i = *self.table_line_of.get(row)?;
        (i != u32::MAX).then_some(i as usize)
    }

    /// Rebuilds the row → ranking position and row → table line look-ups.
    pub(super) fn index_rows(&mut self) {
        let rows = self.data.as_ref().map_or(0, |d| d.rows());
        self.position_of.clear();
        self.position_of.resize(rows, u32::MAX);
        self.table_line_of.clear();
        self.table_line_of.resize(rows, u32::MAX);
        let Some(ranking) = &self.ranking else { return };
        for (p, s) in ranking.ranked.iter().enumerate() {
            if let Some(slot) = self.position_of.get_mut(s.row) {
                *slot = p as u32;
            }
        }
        let lines = if self.sort.is_some() {
            &self.sorted
        } else {
            &self.visible
        };
        for (line, &p) in lines.iter().enumerate() {
            let row = ranking.ranked[p as usize].row;
            if let Some(slot) = self.table_line_of.get_mut(row) {
                *slot = line as u32;
            }
        }
    }

    /// The table's trusted labels with the verdicts added (what the estimate reads).
    pub(super) fn trusted_overlay(&self) -> Option<Arc<TrustedLabels>> {
        self.trusted_overlay.clone()
    }

    pub(super) fn give_verdict(&mut self, row: usize, label: usize) {
        let Some(data) = &self.data else { return };
        if row >= data.rows() || label >= data.classes.len() {
            return self.say(
                Level::Error,
                format!("no row {row} or class {label} to judge"),
            );
        }
        let round = self.round.as_ref().filter(|_| self.round_open);
        if self.verdicts.give(row, label, round) {
            self.verdicts_changed();
        }
    }

    pub(super) fn undo_verdict(&mut self) {
        if self.verdicts.undo().is_some() {
            self.verdicts_changed();
        }
    }

    pub(super) fn redo_verdict(&mut self) {
        if self.verdicts.redo().is_some() {
            self.verdicts_changed();
        }
    }

    /// The verdicts changed: new trusted labels, a new summary, and a new estimate when
    /// the matrices are the estimator's own (hand edits are never replaced unasked).
    pub(super) fn verdicts_changed(&mut self) {
        let Some(data) = self.data.clone() else {
            return;
        };
        self.trusted_overlay = (!self.verdicts.is_empty())
            .then(|| Arc::new(with_verdicts(&data, self.verdicts.verdicts())));
        self.verdict_summary = self.summarise_verdicts(&data);
        if self
            .sort
            .is_some_and(|s| s.column == SuspectColumn::Verdict)
        {
            self.refilter();
        }
        if self.follows_estimate() {
            self.request_estimate();
        }
    }

    /// True when the matrices shown are the estimator's output, untouched, so a new
    /// estimate replaces nothing the user made.
    pub fn follows_estimate(&self) -> bool {
        let untouched = self
            .editor
            .as_ref()
            .is_some_and(|e| e.origin() == MatrixOrigin::Estimated);
        let sources_untouched = self
            .sources
            .as_ref()
            .is_none_or(|s| s.edited_names().is_empty());
        let estimated = self.estimate.as_ref().is_some_and(|e| e.method.is_some());
        untouched && sources_untouched && estimated
    }

    /// Estimates now, or once the running estimate ends (at most one runs, so a quick
    /// run of verdicts never piles up work).
    pub(super) fn request_estimate(&mut self) {
        if self.jobs.running(JobKind::Estimate).is_some() {
            self.estimate_pending = true;
        } else {
            self.start_estimate();
        }
    }

    /// The verdicts as a review with the round's key: the precision of the reviewed
    /// suspects and, from the control rows, the error rate among the rows not listed.
    fn summarise_verdicts(&self, data: &Dataset) -> Option<ReviewSummary> {
        if self.verdicts.is_empty() {
            return None;
        }
        let mut review = Review {
            verdicts: self.verdicts.verdicts().to_vec(),
            not_reviewed: 0,
        };
        let key = self.round.as_ref().map(|round| Key {
            rows: round
                .rows
                .iter()
                .map(|r| {
                    let key = KeyRow {
                        slice: r.slice,
                        p_wrong: round.p_wrong(r),
                    };
                    (r.row, key)
                })
                .collect(),
        });
        // Verdicts given outside a round have no key by nature: a missing key is expected.
        Some(summarise(data, &mut review, key.as_ref(), true))
    }

    /// A round from the worklist as it would be exported now: the budget's suspects
    /// (by rank, through the filters) and its control share drawn at random from the
    /// other rows, shuffled together with the seed.
    pub(super) fn start_round(&mut self) {
        let (Some(data), Some(ranking)) = (self.data.clone(), self.ranking.clone()) else {
            return self.say(Level::Error, "rank the suspects first");
        };
        if !ranking.is_complete() {
            return self.say(
                Level::Error,
                "the suspects are still being ranked; start the round in a moment",
            );
        }
        let (listed, control) = self.worklist_head(&ranking);
        let filter = self.filter();
        let pick = review::Pick {
            control,
            seed: self.session.settings.seed,
            filter: &filter,
            of_row: self.of_row.as_deref(),
        };
        let items = review::ranked_with_control(&ranking, &data, &listed, &pick);
        let rows = items
            .iter()
            .map(|item| RoundRow {
                row: item.score.row,
                slice: item.slice,
                rank: item.rank,
                score: item.score,
            })
            .collect::<Vec<_>>();
        let (n, drawn) = (rows.len(), items.len() - listed.len());
        self.round = Some(Round {
            rows,
            kind: ranking.kind,
        });
        self.round_open = true;
        self.verdict_summary = self.summarise_verdicts(&data);
        self.say(
            Level::Info,
            format!(
                "review round of {n} rows ({drawn} of them drawn at random to measure what the \
                 list misses; which ones is not shown while reviewing)"
            ),
        );
    }

    /// Writes the verdicts as a reviewed worklist: the round's rows as they were ranked
    /// when it started (blind, with its key beside it when it has control rows), or,
    /// without a round, the judged rows by their current rank.
    pub(super) fn export_verdicts(&mut self, path: PathBuf) {
        let (Some(data), Some(ranking)) = (self.data.clone(), self.ranking.clone()) else {
            return self.say(Level::Error, "there are no verdicts to write");
        };
        if self.verdicts.is_empty() || !ranking.is_complete() {
            return self.say(
                Level::Error,
                "give a verdict first (and let the ranking finish)",
            );
        }
        let items: Vec<Item> = match &self.round {
            Some(round) => round
                .rows
                .iter()
                .map(|r| Item {
                    score: r.score,
                    rank: r.rank,
                    slice: r.slice,
                })
                .collect(),
            None => {
                let mut position = vec![0usize; ranking.ranked.len()];
                for (i, s) in ranking.ranked.iter().enumerate() {
                    position[s.row] = i;
                }
                self.verdicts
                    .verdicts()
                    .iter()
                    .map(|v| Item {
                        score: ranking.ranked[position[v.row]],
                        rank: position[v.row] + 1,
                        slice: Slice::Listed,
                    })
                    .collect()
            }
        };
        let verdicts = self.verdicts.verdicts().to_vec();
        let inputs = self.input_paths();
        let kind = self.round.as_ref().map_or(ranking.kind, |r| r.kind);
        let job = self.next_save();
        self.spawn_on_data(job, move |_| {
            let refs: Vec<&Path> = inputs.iter().map(PathBuf::as_path).collect();
            check_not_input(&path, &refs).map_err(fail)?;
            let extras = Extras {
                verdicts: &verdicts,
                ..Extras::default()
            };
            let key = write_worklist_files(&path, &data, kind, &items, extras).map_err(fail)?;
            let keyed = key.map_or(String::new(), |k| format!(" and its key {}", k.display()));
            Ok(JobOutput::Saved(format!(
                "wrote {} verdicts to {}{keyed}",
                verdicts.len(),
                path.display()
            )))
        });
    }

    /// A new table: no verdicts and no round (but those of a session being opened), and
    /// the classes' typical values.
    pub(super) fn reset_review(&mut self, data: &Dataset) {
        self.verdicts = VerdictBook::default();
        self.round = None;
        self.round_open = false;
        self.trusted_overlay = None;
        self.verdict_summary = None;
        self.estimate_pending = false;
        self.sort = None;
        self.typical = Some(Arc::new(typical_values(data)));
        if let Some((verdicts, round)) = self.pending_review.take() {
            self.restore_review(data, &verdicts, &round);
        }
    }

    /// The verdicts and the round as a session keeps them.
    pub(super) fn review_for_session(&self) -> ReviewForSession {
        let Some(data) = &self.data else {
            return ReviewForSession::default();
        };
        let verdicts = self
            .verdicts
            .verdicts()
            .iter()
            .map(|v| SessionVerdict {
                row: v.row,
                id: data.id(v.row).into_owned(),
                label: data.classes[v.label].clone(),
                origin: v.origin.name().to_string(),
            })
            .collect();
        let Some(round) = &self.round else {
            return ReviewForSession {
                verdicts,
                ..ReviewForSession::default()
            };
        };
        let rows = round.rows.iter().map(|r| SessionRoundRow {
            row: r.row,
            id: data.id(r.row).into_owned(),
            slice: r.slice.name().to_string(),
            rank: r.rank,
            score: r.score.score,
            suggested: data.classes[r.score.suggested].clone(),
            second_choice: data.classes[r.score.second_choice].clone(),
            second_choice_prob: r.score.second_choice_prob,
        });
        ReviewForSession {
            verdicts,
            round: rows.collect(),
            round_score: Some(round.kind),
            round_closed: !self.round_open,
        }
    }

    /// A session's verdicts and round for `data`: each row must exist with the same id
    /// and each class by name; what does not fit is left out and said.
    fn restore_review(
        &mut self,
        data: &Dataset,
        verdicts: &[SessionVerdict],
        round: &PendingRound,
    ) {
        let fits = |row: usize, id: &str| row < data.rows() && data.id(row) == id;
        let class = |name: &str| data.classes.iter().position(|c| c == name);
        let kept: Vec<Verdict> = verdicts
            .iter()
            .filter(|v| fits(v.row, &v.id))
            .filter_map(|v| {
                Some(Verdict {
                    row: v.row,
                    label: class(&v.label)?,
                    line: 0,
                    origin: Origin::parse(&v.origin)?,
                })
            })
            .collect();
        let rows: Vec<RoundRow> = round
            .rows
            .iter()
            .filter(|r| fits(r.row, &r.id))
            .filter_map(|r| {
                Some(RoundRow {
                    row: r.row,
                    slice: Slice::parse(&r.slice)?,
                    rank: r.rank,
                    score: RowScore {
                        row: r.row,
                        score: r.score,
                        suggested: class(&r.suggested)?,
                        second_choice: class(&r.second_choice)?,
                        second_choice_prob: r.second_choice_prob,
                    },
                })
            })
            .collect();
        let dropped = verdicts.len() - kept.len() + round.rows.len() - rows.len();
        if dropped > 0 {
            self.say(
                Level::Warning,
                format!(
                    "{dropped} of the session's verdicts or round rows do not match this \
                     table's rows, ids or classes and were left out"
                ),
            );
        }
        self.verdicts = VerdictBook::with_verdicts(kept);
        self.round = match (rows.is_empty(), round.kind) {
            (false, Some(kind)) => Some(Round { rows, kind }),
            _ => None,
        };
        self.round_open = self.round.is_some() && !round.closed;
        self.trusted_overlay = (!self.verdicts.is_empty())
            .then(|| Arc::new(with_verdicts(data, self.verdicts.verdicts())));
        self.verdict_summary = self.summarise_verdicts(data);
    }

    /// Orders `visible` by the chosen column into `sorted`; ties keep rank order. Every
    /// column but a text id sorts a number key read once per row, on every core
    /// (comparing through the ranking took 0.44 s on a million rows, 1.1 s when the ids
    /// were made into strings per comparison; the keys take 0.06-0.07 s;
    /// benches/app.rs).
    pub(super) fn sort_table(&mut self) {
        self.sorted.clear();
        let (Some(sort), Some(ranking), Some(data)) = (self.sort, &self.ranking, &self.data) else {
            return;
        };
        let ranked = &ranking.ranked;
        let verdicts = &self.verdicts;
        let of_row = self.of_row.as_deref();
        let key = |p: u32| -> u64 {
            let s = &ranked[p as usize];
            let k = match sort.column {
                SuspectColumn::Rank => p as usize,
                // Without an id column the ids are the row numbers, in number order.
                SuspectColumn::Row | SuspectColumn::Id => s.row,
                SuspectColumn::Source => of_row.map_or(0, |o| o[s.row] as usize),
                SuspectColumn::Observed => data.labels[s.row],
                SuspectColumn::Suggested => s.suggested,
                SuspectColumn::SecondChoice => s.second_choice,
                // Probabilities are not negative, so their bits are in their order.
                SuspectColumn::SecondChoiceProb => return s.second_choice_prob.max(0.0).to_bits(),
                // Judged rows first (by the class given), then the others.
                SuspectColumn::Verdict => verdicts.get(s.row).map_or(usize::MAX, |v| v.label),
            };
            k as u64
        };
        let descending = sort.descending;
        if sort.column == SuspectColumn::Id && data.ids.is_some() {
            let mut rows = self.visible.clone();
            let id = |p: &u32| data.id(ranked[*p as usize].row);
            rows.par_sort_by(|a, b| {
                let order = id(a).cmp(&id(b));
                if descending { order.reverse() } else { order }.then(a.cmp(b))
            });
            self.sorted = rows;
            return;
        }
        let mut keyed: Vec<(u64, u32)> = self.visible.par_iter().map(|&p| (key(p), p)).collect();
        if descending {
            keyed.par_sort_unstable_by(|a, b| b.0.cmp(&a.0).then(a.1.cmp(&b.1)));
        } else {
            keyed.par_sort_unstable();
        }
        self.sorted = keyed.into_iter().map(|(_, p)| p).collect();
    }
}

/// The verdicts and the round as a session file keeps them.
#[derive(Debug, Default)]
pub(super) struct ReviewForSession {
    pub(super) verdicts: Vec<SessionVerdict>,
    pub(super) round: Vec<SessionRoundRow>,
    pub(super) round_score: Option<crate::noise::scores::ScoreKind>,
    pub(super) round_closed: bool,
}

/// A session's round, waiting for its table.
#[derive(Debug, Clone, Default)]
pub(super) struct PendingRound {
    pub(super) rows: Vec<SessionRoundRow>,
    pub(super) kind: Option<crate::noise::scores::ScoreKind>,
    pub(super) closed: bool,
}
