//! What a review round measured: the precision of the listed suspects, the error rate
//! among the rows the list left out (from the control rows), and how both compare with
//! what flipmend expected. The review job ([`read_reviewed`]) reads a reviewed worklist
//! with its key and summarises it, for the `review` command and the app's import.

use std::path::{Path, PathBuf};

use serde::Serialize;

use crate::data::origin::Origin;
use crate::data::Dataset;
use crate::error::Result;
use crate::io::review::{load_key, load_review, Key, Review, Verdict};
use crate::io::review_table::ReviewTable;
use crate::io::worklist::key_beside;
use crate::learn::metrics::Proportion;

/// A reviewed worklist read back: its verdicts (with their origins), the key it was
/// read with, and what it measured.
#[derive(Debug, Clone)]
pub struct Reviewed {
    /// The verdicts, each with the origin the key gives it.
    pub review: Review,
    /// The key file used: the one given, else `NAME.key.csv` beside the worklist if
    /// there is one.
    pub key_file: Option<PathBuf>,
    /// The key read from it.
    pub key: Option<Key>,
    /// What the review measured.
    pub summary: ReviewSummary,
}

/// The key file a review uses: `key` when given, else the one beside `worklist`.
pub fn key_file_for(worklist: &Path, key: Option<&Path>) -> Option<PathBuf> {
    key.map(Path::to_path_buf).or_else(|| key_beside(worklist))
}

/// Reads the reviewed `worklist` for `data` with its key ([`key_file_for`]) and
/// summarises it. Every cell is checked against the data (row, id, observed label,
/// class names), with the file, line and column of the first problem.
pub fn read_reviewed(
    data: &dyn ReviewTable,
    worklist: &Path,
    key: Option<&Path>,
) -> Result<Reviewed> {
    let key_file = key_file_for(worklist, key);
    let mut review = load_review(worklist, data)?;
    let key = key_file
        .as_deref()
        .map(|path| load_key(path, data))
        .transpose()?;
    // A file read without its key may have lost it: the note says what that costs.
    let summary = summarise(data, &mut review, key.as_ref(), false);
    Ok(Reviewed {
        review,
        key_file,
        key,
        summary,
    })
}

/// Every row's trusted label and how it was obtained, once a review's verdicts are added
/// to the table's own: what reading the merged copy
/// ([`write_merged`](crate::io::review::write_merged)) back would give, without writing
/// it. The app's in-app verdicts reach the estimate this way.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TrustedLabels {
    /// Trusted label per row, `None` where there is none.
    pub labels: Vec<Option<usize>>,
    /// How each row's trusted label was obtained (an audit where there is none, as an
    /// empty origin cell reads).
    pub origins: Vec<Origin>,
}

/// `data`'s trusted labels with `verdicts` added. A verdict replaces an earlier trusted
/// label but keeps its origin, as the merged copy does: a randomly audited row checked
/// again is still a random audit, and a reviewed row is never promoted to one.
pub fn with_verdicts(data: &Dataset, verdicts: &[Verdict]) -> TrustedLabels {
    let rows = data.rows();
    let mut labels = data.trusted.clone().unwrap_or_else(|| vec![None; rows]);
    let mut origins: Vec<Origin> = (0..rows).map(|r| data.origin(r)).collect();
    for v in verdicts.iter().filter(|v| v.row < rows) {
        if labels[v.row].is_none() {
            origins[v.row] = v.origin;
        }
        labels[v.row] = Some(v.label);
    }
    TrustedLabels { labels, origins }
}

/// One slice of a review: how many of its reviewed rows had a wrong label.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct SliceResult {
    /// Wrong labels among the reviewed rows, with a 90 % Wilson interval.
    pub wrong: Proportion,
    /// The mean probability of a wrong label flipmend gave these rows (from the key).
    pub expected: Option<f64>,
}

/// What a review round measured.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ReviewSummary {
    /// Rows with a verdict.
    pub reviewed: usize,
    /// Verdicts that confirm the observed label.
    pub confirmed: usize,
    /// Verdicts that change it.
    pub changed: usize,
    /// Worklist rows left blank.
    pub not_reviewed: usize,
    /// Earlier trusted labels the review replaced with a different class.
    pub replaced: usize,
    /// The listed suspects: their precision.
    pub listed: Option<SliceResult>,
    /// The control rows: the error rate among the rows not listed.
    pub control: Option<SliceResult>,
    /// Rows the worklist did not list (with a key).
    pub unlisted_rows: Option<usize>,
    /// Wrong labels estimated to remain among them: the control rate times their number,
    /// with its interval (low, estimate, high).
    pub missed_errors: Option<(f64, f64, f64)>,
    /// Things the user should know.
    pub notes: Vec<String>,
}

/// Summarises `review` of `data`; with the worklist's `key`, the verdicts get their
/// origins (control rows become [`Origin::Control`]) and the control slice is measured.
/// `missing_key_expected` is true where a review has no key by nature (the app's
/// verdicts given outside a round): the note that warns about a worklist read without
/// its key is then left out, since there is no key to have lost.
pub fn summarise(
    data: &dyn ReviewTable,
    review: &mut Review,
    key: Option<&Key>,
    missing_key_expected: bool,
) -> ReviewSummary {
    let mut notes = Vec::new();
    match key {
        Some(key) => {
            let unknown = review.apply_key(key);
            if unknown > 0 {
                notes.push(format!(
                    "{unknown} reviewed row(s) are not in the key; they count as reviewed suspects"
                ));
            }
        }
        None if missing_key_expected => {}
        None => notes.push(
            "no key: every reviewed row counts as a reviewed suspect (chosen, not random), and \
             what the list missed is not measured"
                .into(),
        ),
    }
    let slice = |origin: Origin| -> Option<SliceResult> {
        let verdicts: Vec<_> = review
            .verdicts
            .iter()
            .filter(|v| v.origin == origin)
            .collect();
        let wrong = verdicts
            .iter()
            .filter(|v| v.label != data.label(v.row))
            .count();
        let p: Vec<f64> = verdicts
            .iter()
            .filter_map(|v| key?.rows.get(&v.row)?.p_wrong)
            .collect();
        let expected = (!p.is_empty() && p.len() == verdicts.len())
            .then(|| p.iter().sum::<f64>() / p.len() as f64);
        Some(SliceResult {
            wrong: Proportion::of(wrong, verdicts.len())?,
            expected,
        })
    };
    let listed = slice(Origin::Review);
    let control = slice(Origin::Control);
    let unlisted_rows = key.map(|k| data.rows() - k.counts().0);
    let missed_errors = control.zip(unlisted_rows).map(|(c, n)| {
        let n = n as f64;
        (c.wrong.low * n, c.wrong.value * n, c.wrong.high * n)
    });
    if let (Some(l), Some(expected)) = (listed, listed.and_then(|l| l.expected)) {
        if expected < l.wrong.low || expected > l.wrong.high {
            notes.push(format!(
                "flipmend expected {:.0} % of the listed rows to be wrong; the review found {:.0} % \
                 (90 % interval {:.0}–{:.0} %): its probabilities are {} here",
                100.0 * expected,
                100.0 * l.wrong.value,
                100.0 * l.wrong.low,
                100.0 * l.wrong.high,
                if expected > l.wrong.high {
                    "too confident"
                } else {
                    "too cautious"
                }
            ));
        }
    }
    ReviewSummary {
        reviewed: review.verdicts.len(),
        confirmed: review.confirmed(data),
        changed: review.changed(data),
        not_reviewed: review.not_reviewed,
        replaced: replaced(data, review),
        listed,
        control,
        unlisted_rows,
        missed_errors,
        notes,
    }
}

/// Earlier trusted labels that a verdict changes.
fn replaced(data: &dyn ReviewTable, review: &Review) -> usize {
    review
        .verdicts
        .iter()
        .filter(|v| {
            data.trusted(v.row)
                .is_some_and(|earlier| earlier != v.label)
        })
        .count()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::io::review::{read_key, read_review};
    use std::path::Path;

    fn data() -> Dataset {
        let mut text = String::from("id,x,label\n");
        for r in 0..10 {
            text.push_str(&format!(
                "r{r},{r},{}\n",
                if r % 2 == 0 { "cat" } else { "dog" }
            ));
        }
        Dataset::from_csv_text(&text)
    }

    #[test]
    fn the_key_splits_precision_from_the_missed_error_rate() {
        // Rows 0–3 listed (p_wrong 0.9 each), rows 8 and 9 control. Reviewers change 3 of
        // the 4 listed rows and 1 of the 2 control rows.
        let d = data();
        let key = "row,id,slice,p_wrong\n0,r0,listed,0.9\n1,r1,listed,0.9\n2,r2,listed,0.9\n\
                   3,r3,listed,0.9\n8,r8,control,0.01\n9,r9,control,0.02\n";
        let key = read_key(key.as_bytes(), Path::new("k.csv"), &d).unwrap();
        let worklist = "row,review\n0,dog\n1,cat\n2,dog\n3,keep\n8,keep\n9,cat\n";
        let mut review = read_review(worklist.as_bytes(), Path::new("w.csv"), &d).unwrap();
        let s = summarise(&d, &mut review, Some(&key), false);
        let listed = s.listed.unwrap();
        assert_eq!((listed.wrong.count, listed.wrong.of), (3, 4));
        assert!((listed.expected.unwrap() - 0.9).abs() < 1e-12);
        let control = s.control.unwrap();
        assert_eq!((control.wrong.count, control.wrong.of), (1, 2));
        assert_eq!(s.unlisted_rows, Some(6));
        let (low, mid, high) = s.missed_errors.unwrap();
        assert!(low < mid && mid == 3.0 && high > mid);
        let origins: Vec<Origin> = review.verdicts.iter().map(|v| v.origin).collect();
        assert_eq!(origins[4..], [Origin::Control, Origin::Control]);
        assert!(origins[..4].iter().all(|&o| o == Origin::Review));
        assert!(s.notes.is_empty(), "{:?}", s.notes);
    }

    #[test]
    fn without_a_key_every_verdict_is_a_reviewed_suspect() {
        let d = data();
        let mut review = read_review(
            "row,review\n0,dog\n5,keep\n".as_bytes(),
            Path::new("w.csv"),
            &d,
        )
        .unwrap();
        let s = summarise(&d, &mut review, None, false);
        assert_eq!(s.listed.unwrap().wrong.count, 1);
        assert_eq!(s.control, None);
        assert_eq!(s.missed_errors, None);
        assert_eq!(s.notes.len(), 1, "{:?}", s.notes);
        assert!(s.notes[0].starts_with("no key"));
    }

    #[test]
    fn an_expected_missing_key_gives_no_note_but_the_same_figures() {
        let d = data();
        let worklist = "row,review\n0,dog\n5,keep\n";
        let read = || read_review(worklist.as_bytes(), Path::new("w.csv"), &d).unwrap();
        let noted = summarise(&d, &mut read(), None, false);
        let expected = summarise(&d, &mut read(), None, true);
        assert!(expected.notes.is_empty(), "{:?}", expected.notes);
        let without_notes = ReviewSummary {
            notes: Vec::new(),
            ..noted
        };
        assert_eq!(expected, without_notes);
    }

    #[test]
    fn a_confident_list_that_reviews_refute_is_flagged() {
        let d = data();
        let mut key = String::from("row,slice,p_wrong\n");
        let mut worklist = String::from("row,review\n");
        for r in 0..10 {
            key.push_str(&format!("{r},listed,0.95\n"));
            worklist.push_str(&format!("{r},keep\n"));
        }
        let key = read_key(key.as_bytes(), Path::new("k.csv"), &d).unwrap();
        let review = read_review(worklist.as_bytes(), Path::new("w.csv"), &d).unwrap();
        // The flag only concerns a missing key: with one, the notes are the same.
        for missing_key_expected in [false, true] {
            let s = summarise(&d, &mut review.clone(), Some(&key), missing_key_expected);
            assert!(
                s.notes.iter().any(|n| n.contains("too confident")),
                "{:?}",
                s.notes
            );
        }
    }

    #[test]
    fn verdicts_added_in_memory_equal_the_merged_copy_read_back() {
        // The reference is the command line's route: write the merged copy, load it.
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("d.csv");
        std::fs::write(
            &path,
            "id,x,label,trusted,trusted_origin\nr0,0,cat,,\nr1,1,dog,cat,\nr2,2,cat,,\n\
             r3,3,dog,dog,review\nr4,4,cat,,\n",
        )
        .unwrap();
        let options = crate::data::TableOptions::default();
        let d = Dataset::load(&path, &options).unwrap();
        let verdict = |row, label, origin| Verdict {
            row,
            label,
            line: 0,
            origin,
        };
        // A new reviewed suspect, a control row, and re-checks of an audited row and of
        // a reviewed one (they keep their origins).
        let review = Review {
            verdicts: vec![
                verdict(0, 1, Origin::Review),
                verdict(2, 0, Origin::Control),
                verdict(1, 1, Origin::Review),
                verdict(3, 0, Origin::Control),
            ],
            not_reviewed: 0,
        };
        let merged = dir.path().join("m.csv");
        crate::io::write_atomic(&merged, |w| {
            crate::io::review::write_merged(w, &d, b',', &review)
        })
        .unwrap();
        let back = Dataset::load(&merged, &options).unwrap();
        let got = with_verdicts(&d, &review.verdicts);
        assert_eq!(Some(&got.labels), back.trusted.as_ref());
        let read: Vec<Origin> = (0..back.rows()).map(|r| back.origin(r)).collect();
        assert_eq!(got.origins, read);
        assert_eq!(
            got.origins[..4],
            [
                Origin::Review,
                Origin::Audit,
                Origin::Control,
                Origin::Review
            ]
        );
    }
}
