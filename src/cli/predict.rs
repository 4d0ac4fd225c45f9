//! `flipmend predict`: apply a saved model to a table.

use std::fmt::Write as _;
use std::io::Write;
use std::path::PathBuf;

use clap::Args;

use crate::data::roles::parse_delimiter;
use crate::data::{Dataset, TableOptions};
use crate::error::{Error, Result};
use crate::io::columnar::Format;
use crate::io::model::read_model;
use crate::io::table_out::{CellKind, OutColumn, TableWriter};
use crate::io::{check_not_input, write_atomic};
use crate::learn::train::predict_classes;

/// Flags of `flipmend predict`.
#[derive(Debug, Clone, Args)]
pub struct PredictArgs {
    /// A model file written by `flipmend train`
    #[arg(long, value_name = "FILE")]
    pub model: PathBuf,
    /// The table to predict on: CSV with the model's feature columns (a label column is
    /// not needed)
    #[arg(long, value_name = "FILE")]
    pub data: PathBuf,
    /// Field delimiter [default: ',' or tab for .tsv]
    #[arg(long, value_name = "CHAR", value_parser = parse_delimiter)]
    pub delimiter: Option<u8>,
    /// Column identifying rows [default: 'id' if present, else 0-based row numbers]
    #[arg(long, value_name = "COL")]
    pub id: Option<String>,
    /// Where to write the predictions: id, predicted, then one probability column per class
    /// (Parquet when FILE ends in .parquet, else CSV)
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
}

/// Runs `predict`.
pub fn run(args: &PredictArgs, out: &mut dyn Write) -> Result<()> {
    check_not_input(&args.out, &[args.model.as_path(), args.data.as_path()])?;
    let file = std::fs::File::open(&args.model).map_err(|source| Error::Read {
        path: args.model.clone(),
        source,
    })?;
    let (model_file, model) = read_model(std::io::BufReader::new(file), &args.model)?;
    let options = TableOptions {
        delimiter: args.delimiter,
        id: args.id.clone(),
        features: Some(model_file.features.clone()),
        unlabeled: true,
        ..Default::default()
    };
    let data = Dataset::load(&args.data, &options)
        .map_err(|e| missing_features(e, &model_file.features))?;
    let probs = model.predict_proba(data.features.view(), None);
    let predicted = predict_classes(&probs);
    write_atomic(&args.out, |w| {
        let mut columns = vec![
            OutColumn::new("id", CellKind::Text),
            OutColumn::new("predicted", CellKind::Text),
        ];
        let classes = model_file.classes.iter();
        columns.extend(classes.map(|c| OutColumn::new(c, CellKind::Float)));
        let mut table = TableWriter::new(w, Format::of(&args.out), &columns)?;
        for (row, p) in probs.rows().into_iter().enumerate() {
            let mut record = vec![
                data.id(row).into_owned(),
                model_file.classes[predicted[row]].clone(),
            ];
            record.extend(p.iter().map(|v| v.to_string()));
            table.row(&record)?;
        }
        table.finish()
    })?;
    let mut text = String::new();
    let _ = writeln!(
        text,
        "{}: {} rows predicted with {} ({} correction)",
        args.out.display(),
        data.rows(),
        args.model.display(),
        model_file.correction
    );
    let mut counts = vec![0usize; model_file.classes.len()];
    predicted.iter().for_each(|&c| counts[c] += 1);
    for (class, count) in model_file.classes.iter().zip(counts) {
        let _ = writeln!(text, "  {class}: {count}");
    }
    super::emit(out, &text)
}

/// Turns "--features names the column …" into a message about the model's features.
fn missing_features(error: Error, features: &[String]) -> Error {
    match &error {
        Error::Input(input) => match &input.problem {
            crate::Problem::UnknownColumn { flag, name, available } if flag == "--features" => Error::Usage(format!(
                "{}: the model needs the feature column '{name}', which this file does not have (its columns: {available}; \
                 the model's features: {})",
                input.location.path.display(),
                features.join(", ")
            )),
            _ => error,
        },
        _ => error,
    }
}
