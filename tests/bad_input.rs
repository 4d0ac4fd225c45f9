//! Every bad-input case of the table and probability loaders, through the real binary:
//! exit code 2, one line naming the file (and line/column where they apply) and the
//! problem, no panic, and no output file left behind.

mod common;

use common::{fixture, flipmend, TempDir};

/// Runs `inspect --data <fixture> <extra…> --json <tmp>/out.json`, asserts a bad-input
/// failure mentioning `parts`, and that no file was written.
fn refused(data: &str, extra: &[&str], parts: &[&str]) {
    let dir = TempDir::new();
    let out = dir.path("out.json");
    let data = fixture(data);
    let mut args = vec!["inspect", "--data", data.as_str()];
    let extra: Vec<String> = extra
        .iter()
        .map(|a| {
            if a.starts_with("probs") {
                fixture(a)
            } else {
                a.to_string()
            }
        })
        .collect();
    args.extend(extra.iter().map(String::as_str));
    let out_text = out.to_string_lossy().into_owned();
    args.extend(["--json", out_text.as_str()]);
    flipmend(&args).assert_bad_input(parts);
    assert!(
        dir.files().is_empty(),
        "nothing may be written: {:?}",
        dir.files()
    );
}

#[test]
fn missing_file() {
    refused(
        "does_not_exist.csv",
        &[],
        &["does_not_exist.csv", "cannot read", "No such file"],
    );
}

#[test]
fn empty_file() {
    refused("empty.csv", &[], &["empty.csv", "the file is empty"]);
}

#[test]
fn header_only() {
    refused("header_only.csv", &[], &["header_only.csv", "no data rows"]);
}

#[test]
fn ragged_row() {
    refused(
        "ragged.csv",
        &[],
        &["ragged.csv, line 3", "4 fields but the header has 3"],
    );
}

#[test]
fn unknown_column_in_a_flag() {
    refused(
        "good.csv",
        &["--label", "species"],
        &[
            "good.csv, line 1",
            "--label names the column 'species'",
            "id, f1, f2",
        ],
    );
    refused(
        "good.csv",
        &["--features", "f1,f9"],
        &["--features names the column 'f9'"],
    );
    refused(
        "good.csv",
        &["--trusted", "audit"],
        &["--trusted names the column 'audit'"],
    );
    refused(
        "good.csv",
        &["--id", "key"],
        &["--id names the column 'key'"],
    );
}

#[test]
fn no_label_column() {
    refused(
        "no_label.csv",
        &[],
        &["no_label.csv", "no label column", "f1, f2, class"],
    );
}

#[test]
fn wrong_delimiter_gets_a_hint() {
    refused(
        "semicolon.csv",
        &[],
        &["no label column", "--delimiter ';'"],
    );
}

#[test]
fn fewer_than_two_classes() {
    refused(
        "one_class.csv",
        &[],
        &["one_class.csv", "found 1 class(es) (a)", "at least 2"],
    );
}

#[test]
fn a_class_with_one_row_is_a_warning_not_an_error() {
    let run = flipmend(&["inspect", "--data", &fixture("singleton_class.csv")]);
    run.assert_ok();
    assert!(
        run.stdout.contains("warning: class 'b' has a single row"),
        "{}",
        run.stdout
    );
}

#[test]
fn non_numeric_feature_value() {
    refused(
        "not_numeric.csv",
        &["--features", "f1,f2"],
        &[
            "not_numeric.csv, line 3, column 2 'f2'",
            "'oops' is not a number",
        ],
    );
}

#[test]
fn non_numeric_column_is_ignored_with_a_notice_by_default() {
    let run = flipmend(&["inspect", "--data", &fixture("not_numeric.csv")]);
    run.assert_ok();
    assert!(
        run.stdout.contains("f2: not numeric ('oops' on line 3)"),
        "{}",
        run.stdout
    );
    assert!(run.stdout.contains("features:     f1\n"), "{}", run.stdout);
}

#[test]
fn nan_in_features() {
    refused(
        "nan_feature.csv",
        &[],
        &[
            "nan_feature.csv, line 3, column 2 'f2'",
            "'NaN' is not a finite number",
        ],
    );
}

#[test]
fn infinity_in_features() {
    refused(
        "inf_feature.csv",
        &[],
        &["line 3, column 2 'f2'", "'-inf' is not a finite number"],
    );
}

#[test]
fn missing_feature_values() {
    refused(
        "missing_feature.csv",
        &[],
        &[
            "missing_feature.csv, line 3, column 2 'f2'",
            "1 empty cell(s)",
            "--features",
        ],
    );
}

#[test]
fn invalid_utf8() {
    refused(
        "invalid_utf8.csv",
        &[],
        &[
            "invalid_utf8.csv, line 3, column 2 'label'",
            "not valid UTF-8",
        ],
    );
}

#[test]
fn duplicate_ids() {
    refused(
        "duplicate_ids.csv",
        &[],
        &[
            "duplicate_ids.csv, line 4, column 1 'id'",
            "'x1' was already used on line 2",
        ],
    );
}

#[test]
fn probabilities_missing_a_class_column() {
    refused(
        "good.csv",
        &["--probs", "probs_missing_class.csv"],
        &[
            "probs_missing_class.csv, line 1",
            "no column for the class(es) bird",
        ],
    );
}

#[test]
fn probabilities_with_an_extra_column() {
    refused(
        "good.csv",
        &["--probs", "probs_extra_column.csv"],
        &["probs_extra_column.csv, line 1", "fish are not classes"],
    );
}

#[test]
fn probabilities_with_the_wrong_row_count() {
    refused(
        "good.csv",
        &["--probs", "probs_short.csv"],
        &["probs_short.csv", "2 probability rows for 6 data rows"],
    );
}

#[test]
fn negative_probability() {
    refused(
        "good.csv",
        &["--probs", "probs_negative.csv"],
        &[
            "probs_negative.csv, line 3, column 2 'bird'",
            "-0.1 is outside [0, 1]",
        ],
    );
}

#[test]
fn probabilities_not_summing_to_one() {
    refused(
        "good.csv",
        &["--probs", "probs_bad_sum.csv"],
        &[
            "probs_bad_sum.csv, line 4",
            "sum to 0.800000",
            "--renormalize",
        ],
    );
}

#[test]
fn renormalize_fixes_bad_sums_with_a_notice() {
    let run = flipmend(&[
        "inspect",
        "--data",
        &fixture("good.csv"),
        "--probs",
        &fixture("probs_bad_sum.csv"),
        "--renormalize",
    ]);
    run.assert_ok();
    assert!(
        run.stdout.contains("1 probability row(s) did not sum to 1"),
        "{}",
        run.stdout
    );
}

#[test]
fn probability_ids_that_do_not_join() {
    refused(
        "good.csv",
        &["--probs", "probs_unknown_id.csv"],
        &[
            "probs_unknown_id.csv, line 7, column 1 'id'",
            "'r77' is not in the dataset",
        ],
    );
}

#[test]
fn npy_of_the_wrong_dtype() {
    refused(
        "good.csv",
        &["--probs", "probs_int.npy"],
        &["probs_int.npy", "holds '<i8'", "float32"],
    );
}

#[test]
fn npy_of_the_wrong_shape() {
    refused(
        "good.csv",
        &["--probs", "probs_wrong_shape.npy"],
        &["probs_wrong_shape.npy", "shape (6, 2); expected (6, 3)"],
    );
    refused(
        "good.csv",
        &["--probs", "probs_1d.npy"],
        &["shape (6,); expected (6, 3)"],
    );
}

#[test]
fn refuses_to_write_over_an_input() {
    let dir = TempDir::new();
    let data = dir.path("data.csv");
    std::fs::copy(fixture("good.csv"), &data).unwrap();
    let before = std::fs::read(&data).unwrap();
    let data = data.to_string_lossy().into_owned();
    flipmend(&["inspect", "--data", &data, "--json", &data])
        .assert_bad_input(&["refusing to write", "input files"]);
    assert_eq!(
        std::fs::read(&data).unwrap(),
        before,
        "the input is untouched"
    );
}

#[test]
fn unknown_trusted_origin() {
    refused(
        "bad_origin.csv",
        &[],
        &[
            "bad_origin.csv, line 4, column 6 'trusted_origin'",
            "'guessed' is not an origin of a trusted label",
        ],
    );
}

#[test]
fn a_bootstrap_of_one_resample_is_refused() {
    let run = flipmend(&[
        "estimate",
        "--data",
        &fixture("good.csv"),
        "--bootstrap",
        "1",
    ]);
    assert_eq!(run.code, 2);
    assert!(
        run.stderr.contains("at least 2 resamples"),
        "{}",
        run.stderr
    );
}

#[test]
fn usage_errors_exit_2() {
    let run = flipmend(&[
        "inspect",
        "--data",
        &fixture("good.csv"),
        "--delimiter",
        "ab",
    ]);
    assert_eq!(run.code, 2);
    assert!(run.stderr.contains("not a delimiter"), "{}", run.stderr);
    assert_eq!(flipmend(&["inspect"]).code, 2, "--data is required");
}
