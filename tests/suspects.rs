//! `flipmend suspects` and `flipmend review` through the real binary: the worklist, the
//! review round trip, and every malformed review.

mod common;

use common::{fixture, flipmend, TempDir};

fn demo() -> String {
    format!("{}/demo-data/recycling.csv", env!("CARGO_MANIFEST_DIR"))
}

fn read_csv(path: &std::path::Path) -> Vec<Vec<String>> {
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .from_path(path)
        .unwrap();
    rdr.records()
        .map(|r| r.unwrap().iter().map(String::from).collect())
        .collect()
}

#[test]
fn worklist_columns_order_and_caution() {
    let dir = TempDir::new();
    let out = dir.path("w.csv");
    let json = dir.path("s.json");
    let run = flipmend(&[
        "suspects",
        "--data",
        &demo(),
        "--top",
        "25",
        "--control",
        "0",
        "--out",
        &out.to_string_lossy(),
        "--json",
        &json.to_string_lossy(),
    ]);
    run.assert_ok();
    assert!(
        run.stdout.contains("not automatic corrections"),
        "{}",
        run.stdout
    );
    let rows = read_csv(&out);
    assert_eq!(
        rows[0],
        [
            "rank",
            "row",
            "id",
            "observed",
            "suggested",
            "score",
            "p_wrong",
            "second_choice",
            "second_choice_prob",
            "review"
        ]
    );
    assert_eq!(rows.len(), 26);
    let scores: Vec<f64> = rows[1..].iter().map(|r| r[5].parse().unwrap()).collect();
    assert!(scores.windows(2).all(|w| w[0] >= w[1]), "sorted by score");
    // The score is the log-odds of p_wrong (6 decimals each).
    let p_wrong: Vec<f64> = rows[1..].iter().map(|r| r[6].parse().unwrap()).collect();
    for (s, p) in scores.iter().zip(&p_wrong) {
        assert!((1.0 / (1.0 + (-s).exp()) - p).abs() < 1e-5, "{s} {p}");
    }
    for (i, r) in rows[1..].iter().enumerate() {
        assert_eq!(r[0], (i + 1).to_string());
        assert!(r[9].is_empty(), "review left empty");
    }
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert_eq!(summary["listed"], 25);
    let expected: f64 = p_wrong.iter().sum();
    assert!((summary["expected_errors"].as_f64().unwrap() - expected).abs() < 1e-3);
    let per_class: u64 = summary["per_class"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c["listed"].as_u64().unwrap())
        .sum();
    assert_eq!(per_class, 25);
}

#[test]
fn selection_flags() {
    let dir = TempDir::new();
    let out = dir.path("w.csv");
    let path = out.to_string_lossy().into_owned();
    let data = demo();
    flipmend(&[
        "suspects",
        "--data",
        &data,
        "--score",
        "self",
        "--threshold",
        "0.9",
        "--control",
        "0",
        "--out",
        &path,
    ])
    .assert_ok();
    let rows = read_csv(&out);
    assert!(rows[1..]
        .iter()
        .all(|r| r[6].parse::<f64>().unwrap() >= 0.9));
    flipmend(&[
        "suspects",
        "--data",
        &data,
        "--all",
        "--per-class-cap",
        "3",
        "--classes",
        "paper,glass",
        "--control",
        "0",
        "--out",
        &path,
    ])
    .assert_ok();
    let rows = read_csv(&out);
    assert_eq!(rows.len() - 1, 6);
    assert!(rows[1..].iter().all(|r| r[3] == "paper" || r[3] == "glass"));
    flipmend(&[
        "suspects",
        "--data",
        &data,
        "--top",
        "3",
        "--control",
        "0",
        "--with-features",
        "--out",
        &path,
    ])
    .assert_ok();
    assert_eq!(read_csv(&out)[0].len(), 10 + 12);
    flipmend(&["suspects", "--data", &data, "--classes", "plastic"])
        .assert_bad_input(&["--classes names 'plastic'"]);
}

#[test]
fn review_round_trip() {
    let dir = TempDir::new();
    let data_path = dir.path("data.csv");
    std::fs::copy(demo(), &data_path).unwrap();
    let before = std::fs::read(&data_path).unwrap();
    let data = data_path.to_string_lossy().into_owned();
    let worklist = dir.path("w.csv");
    flipmend(&[
        "suspects",
        "--data",
        &data,
        "--top",
        "6",
        "--control",
        "0",
        "--out",
        &worklist.to_string_lossy(),
    ])
    .assert_ok();
    // The reviewers: accept the suggestion on rows 1–2, keep the label on row 3, type the
    // observed class on row 4, leave rows 5–6 blank.
    let mut rows = read_csv(&worklist);
    rows[1][9] = rows[1][4].clone();
    rows[2][9] = rows[2][4].clone();
    rows[3][9] = "keep".into();
    rows[4][9] = rows[4][3].clone();
    let reviewed = dir.path("reviewed.csv");
    let mut w = csv::Writer::from_path(&reviewed).unwrap();
    rows.iter().for_each(|r| w.write_record(r).unwrap());
    w.flush().unwrap();
    let merged = dir.path("merged.csv");
    let run = flipmend(&[
        "review",
        "--data",
        &data,
        "--worklist",
        &reviewed.to_string_lossy(),
        "--out",
        &merged.to_string_lossy(),
    ]);
    run.assert_ok();
    let changed = rows[1..3].iter().filter(|r| r[3] != r[4]).count();
    assert!(
        run.stdout
            .contains(&format!("changed:                 {changed}")),
        "{}",
        run.stdout
    );
    assert!(
        run.stdout
            .contains(&format!("confirmed (label kept):  {}", 4 - changed)),
        "{}",
        run.stdout
    );
    assert!(
        run.stdout.contains("not reviewed:            2"),
        "{}",
        run.stdout
    );
    assert_eq!(
        std::fs::read(&data_path).unwrap(),
        before,
        "the input is byte-identical"
    );
    // The merged file: same rows and cells, with the verdicts in 'trusted' and their
    // origin in a new last column 'trusted_origin' (reviews of listed suspects).
    let original = read_csv(&data_path);
    let mut out = read_csv(&merged);
    assert_eq!(out.len(), original.len());
    assert_eq!(out[0].last().unwrap(), "trusted_origin");
    let origins: Vec<String> = out.iter_mut().map(|r| r.pop().unwrap()).collect();
    let trusted = original[0].iter().position(|h| h == "trusted").unwrap();
    let expect: Vec<(usize, String)> = rows[1..5]
        .iter()
        .map(|r| {
            (
                r[1].parse::<usize>().unwrap(),
                if r[9] == "keep" {
                    r[3].clone()
                } else {
                    r[9].clone()
                },
            )
        })
        .collect();
    for (i, (orig, new)) in original.iter().zip(&out).enumerate().skip(1) {
        let row = i - 1;
        match expect.iter().find(|(r, _)| *r == row) {
            Some((_, label)) => {
                assert_eq!(&new[trusted], label, "row {row}");
                let earlier = !orig[trusted].is_empty();
                let origin = if earlier { "audit" } else { "review" };
                assert_eq!(
                    origins[i], origin,
                    "row {row}: an earlier audit stays an audit"
                );
                let mut rest_a = orig.clone();
                let mut rest_b = new.clone();
                rest_a.remove(trusted);
                rest_b.remove(trusted);
                assert_eq!(rest_a, rest_b);
            }
            None => {
                assert_eq!(orig, new, "row {row} unchanged");
                assert_eq!(origins[i], "", "row {row}");
            }
        }
    }
    // The merged file feeds the trusted estimator.
    flipmend(&[
        "estimate",
        "--data",
        &merged.to_string_lossy(),
        "--method",
        "trusted",
    ])
    .assert_ok();
}

#[test]
fn review_adds_a_trusted_column_when_there_is_none() {
    let dir = TempDir::new();
    let reviewed = dir.path("r.csv");
    std::fs::write(&reviewed, "row,review\n0,a\n2,keep\n").unwrap();
    let merged = dir.path("m.csv");
    flipmend(&[
        "review",
        "--data",
        &fixture("singleton_class.csv"),
        "--worklist",
        &reviewed.to_string_lossy(),
        "--out",
        &merged.to_string_lossy(),
    ])
    .assert_ok();
    assert_eq!(
        std::fs::read_to_string(&merged).unwrap(),
        "f1,label,trusted,trusted_origin\n1,a,a,review\n2,a,,\n3,b,b,review\n"
    );
}

#[test]
fn malformed_reviews_exit_2_and_write_nothing() {
    let cases: [(&str, &[&str]); 7] = [
        ("rank,id\n1,r1\n", &["needs the columns 'row' and 'review'"]),
        (
            "row,review\n9,cat\n",
            &["line 2, column 1 'row'", "'9' is not a data row (0 to 5)"],
        ),
        (
            "row,id,review\n0,r2,cat\n",
            &["line 2, column 2 'id'", "row 0 has the id 'r1' in the data"],
        ),
        (
            "row,observed,review\n0,dog,cat\n",
            &["column 2 'observed'", "row 0 is labelled 'cat'"],
        ),
        (
            "row,review\n0,parrot\n",
            &["column 2 'review'", "'parrot' is not a class", "'keep'"],
        ),
        (
            "row,review\n0,cat\n1,dog\n0,bird\n",
            &[
                "line 4, column 2 'review'",
                "row 0 was reviewed as 'cat' on line 2",
            ],
        ),
        ("", &["the file is empty"]),
    ];
    for (text, parts) in cases {
        let dir = TempDir::new();
        let reviewed = dir.path("r.csv");
        std::fs::write(&reviewed, text).unwrap();
        let merged = dir.path("m.csv");
        flipmend(&[
            "review",
            "--data",
            &fixture("good.csv"),
            "--worklist",
            &reviewed.to_string_lossy(),
            "--out",
            &merged.to_string_lossy(),
        ])
        .assert_bad_input(parts);
        assert_eq!(dir.files(), ["r.csv"], "nothing written for {text:?}");
    }
    let dir = TempDir::new();
    let reviewed = dir.path("r.csv");
    std::fs::write(&reviewed, "row,review\n0,cat\n").unwrap();
    flipmend(&[
        "review",
        "--data",
        &fixture("good.csv"),
        "--worklist",
        &reviewed.to_string_lossy(),
        "--out",
        &reviewed.to_string_lossy(),
    ])
    .assert_bad_input(&["refusing to write"]);
}

#[test]
fn a_blind_worklist_with_control_rows_comes_back_with_its_key() {
    // The default worklist: 95 suspects and 5 control rows (5 % of a budget of 100),
    // shuffled, with no column that tells them apart; the key says which is which, and
    // `review` finds it beside the worklist.
    let dir = TempDir::new();
    let data = demo();
    let worklist = dir.path("w.csv");
    let run = flipmend(&[
        "suspects",
        "--data",
        &data,
        "--seed",
        "4",
        "--out",
        &worklist.to_string_lossy(),
    ]);
    run.assert_ok();
    assert!(run.stdout.contains("plus 5 control rows"), "{}", run.stdout);
    let rows = read_csv(&worklist);
    assert_eq!(rows[0], ["item", "row", "id", "observed", "review"]);
    assert_eq!(rows.len(), 101);
    let key = read_csv(&dir.path("w.key.csv"));
    let slice = key[0].iter().position(|h| h == "slice").unwrap();
    let control: Vec<&Vec<String>> = key[1..].iter().filter(|r| r[slice] == "control").collect();
    assert_eq!(control.len(), 5);
    let rank = key[0].iter().position(|h| h == "rank").unwrap();
    assert!(
        control
            .iter()
            .all(|r| r[rank].parse::<usize>().unwrap() > 95),
        "control rows come from the unlisted rows"
    );
    let positions: Vec<usize> = key[1..]
        .iter()
        .enumerate()
        .filter(|(_, r)| r[slice] == "control")
        .map(|(i, _)| i)
        .collect();
    assert_ne!(
        positions,
        vec![95, 96, 97, 98, 99],
        "shuffled in, not appended"
    );
    // The same seed draws the same worklist.
    let again = dir.path("again.csv");
    flipmend(&[
        "suspects",
        "--data",
        &data,
        "--seed",
        "4",
        "--out",
        &again.to_string_lossy(),
    ])
    .assert_ok();
    assert_eq!(read_csv(&again), rows);
    // Reviewers keep every label but the first row's.
    let mut reviewed = rows.clone();
    for (i, r) in reviewed[1..].iter_mut().enumerate() {
        r[4] = if i == 0 {
            "glass".into()
        } else {
            "keep".into()
        };
    }
    let reviewed_path = dir.path("w_done.csv");
    let mut w = csv::Writer::from_path(&reviewed_path).unwrap();
    reviewed.iter().for_each(|r| w.write_record(r).unwrap());
    w.flush().unwrap();
    let merged = dir.path("merged.csv");
    let json = dir.path("review.json");
    let run = flipmend(&[
        "review",
        "--data",
        &data,
        "--worklist",
        &reviewed_path.to_string_lossy(),
        "--key",
        &dir.path("w.key.csv").to_string_lossy(),
        "--out",
        &merged.to_string_lossy(),
        "--json",
        &json.to_string_lossy(),
    ]);
    run.assert_ok();
    assert!(
        run.stdout.contains("control rows found wrong:"),
        "{}",
        run.stdout
    );
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert_eq!(summary["control"]["wrong"]["of"], 5);
    assert_eq!(summary["listed"]["wrong"]["of"], 95);
    let out = read_csv(&merged);
    let origin = out[0].iter().position(|h| h == "trusted_origin").unwrap();
    let count = |word: &str| out[1..].iter().filter(|r| r[origin] == word).count();
    let earlier_audits = read_csv(std::path::Path::new(&data))[1..]
        .iter()
        .zip(&out[1..])
        .filter(|(orig, new)| !orig[orig.len() - 1].is_empty() && !new[origin].is_empty())
        .count();
    assert_eq!(count("control") + count("review") + earlier_audits, 100);
    assert!(count("control") <= 5 && count("control") + earlier_audits >= 5);
    // The trusted estimator leaves the reviewed rows out, and says so.
    let run = flipmend(&[
        "estimate",
        "--data",
        &merged.to_string_lossy(),
        "--method",
        "trusted",
        "--fallback",
        "quantile",
    ]);
    run.assert_ok();
    assert!(
        run.stdout.contains("from reviews left out"),
        "{}",
        run.stdout
    );
}
