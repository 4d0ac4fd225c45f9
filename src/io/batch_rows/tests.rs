//! A batch an engine hands over is read as the streamed run reads a Parquet part: the
//! same classes, trusted labels, origins and probabilities, and the same refusals,
//! located by the rows' table rows.

use std::sync::Arc;

use arrow_array::{Float32Array, Float64Array, Int64Array, RecordBatch, StringArray, UInt64Array};
use arrow_schema::{DataType, Field, Schema};

use super::*;

fn spec(renormalize: bool) -> BatchSpec {
    BatchSpec {
        table: PathBuf::from("parts/"),
        header: [
            "__row",
            "label",
            "audit",
            "audit_origin",
            "id",
            "cat",
            "dog",
        ]
        .map(String::from)
        .to_vec(),
        row: 0,
        label: 1,
        trusted: Some(2),
        origin: Some(3),
        id: Some(4),
        probs: vec![5, 6],
        classes: vec!["cat".into(), "dog".into()],
        renormalize,
    }
}

fn batch(labels: [&str; 3], cat: [f64; 3]) -> RecordBatch {
    let schema = Arc::new(Schema::new(vec![
        Field::new("__row", DataType::UInt64, false),
        Field::new("label", DataType::Utf8, false),
        Field::new("audit", DataType::Utf8, true),
        Field::new("audit_origin", DataType::Utf8, true),
        Field::new("id", DataType::Int64, false),
        Field::new("cat", DataType::Float64, false),
        Field::new("dog", DataType::Float32, false),
    ]));
    let dog: Vec<f32> = cat.iter().map(|&c| (1.0 - c) as f32).collect();
    RecordBatch::try_new(
        schema,
        vec![
            Arc::new(UInt64Array::from(vec![40, 41, 7])),
            Arc::new(StringArray::from(labels.to_vec())),
            Arc::new(StringArray::from(vec![Some("dog"), None, Some("cat")])),
            Arc::new(StringArray::from(vec![Some("review"), None, Some("")])),
            Arc::new(Int64Array::from(vec![5, 6, 7])),
            Arc::new(Float64Array::from(cat.to_vec())),
            Arc::new(Float32Array::from(dog)),
        ],
    )
    .unwrap()
}

#[test]
fn a_batch_is_read_in_class_terms_with_its_table_rows() {
    let rows = spec(false)
        .read(&batch(["dog", "cat", "dog"], [0.25, 0.5, 1.0]), true)
        .unwrap();
    assert_eq!(rows.rows, vec![40, 41, 7]);
    assert_eq!(rows.labels, vec![1, 0, 1]);
    assert_eq!(rows.trusted, Some(vec![Some(1), None, Some(0)]));
    // An empty origin cell is a random audit, as in every reader.
    assert_eq!(
        rows.origins,
        Some(vec![Origin::Review, Origin::Audit, Origin::Audit])
    );
    assert_eq!(rows.ids, Some(vec!["5".into(), "6".into(), "7".into()]));
    assert_eq!(rows.probs.row(0).to_vec(), vec![0.25, 0.75]);
    assert_eq!(rows.probs.row(2).to_vec(), vec![1.0, 0.0]);
    assert!(spec(false)
        .read(&batch(["dog"; 3], [0.5; 3]), false)
        .unwrap()
        .ids
        .is_none());
}

#[test]
fn a_label_outside_the_classes_is_refused_at_its_table_row() {
    let err = spec(false)
        .read(&batch(["dog", "cow", "dog"], [0.5; 3]), false)
        .unwrap_err()
        .to_string();
    assert!(err.contains("row 41") && err.contains("'cow'"), "{err}");
}

#[test]
fn an_empty_label_is_refused_by_the_csv_rules() {
    let err = spec(false)
        .read(&batch(["dog", "dog", ""], [0.5; 3]), false)
        .unwrap_err()
        .to_string();
    assert!(err.contains("row 7") && err.contains("label"), "{err}");
}

#[test]
fn probability_rows_are_checked_or_rescaled() {
    let mut odd = batch(["dog"; 3], [0.5; 3]);
    let cat = Arc::new(Float64Array::from(vec![0.5, 0.5, 0.9]));
    let mut columns = odd.columns().to_vec();
    columns[5] = cat;
    odd = RecordBatch::try_new(odd.schema(), columns).unwrap();
    let err = spec(false).read(&odd, false).unwrap_err().to_string();
    assert!(err.contains("row 7") && err.contains("1.4"), "{err}");
    let rescaled = spec(true).read(&odd, false).unwrap();
    assert!((rescaled.probs[(2, 0)] - 0.9 / 1.4).abs() < 1e-6);
}
