//! Reading one column of a table as text, for columns outside the main roles (such as
//! the `--truth` column of a synthetic benchmark). A plain sequential pass: these are
//! aids, not the hot path.

use std::path::Path;

use crate::error::{Error, Location, Problem, Result};

/// The cells of column `name` in data-row order.
pub fn read_text_column(path: &Path, delimiter: u8, name: &str) -> Result<Vec<String>> {
    let file = std::fs::File::open(path).map_err(|source| Error::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let mut rdr = csv::ReaderBuilder::new()
        .delimiter(delimiter)
        .flexible(true)
        .from_reader(file);
    let syntax = crate::error::csv_syntax(path);
    let headers = rdr.byte_headers().map_err(syntax)?.clone();
    let column = headers
        .iter()
        .position(|h| {
            String::from_utf8_lossy(h)
                .trim()
                .trim_start_matches('\u{feff}')
                == name
        })
        .ok_or_else(|| Error::Usage(format!("{}: no column named '{name}'", path.display())))?;
    let mut cells = Vec::new();
    let mut record = csv::ByteRecord::new();
    while rdr.read_byte_record(&mut record).map_err(syntax)? {
        let line = record.position().map_or(0, |p| p.line());
        let cell = record.get(column).unwrap_or(b"");
        let text = std::str::from_utf8(cell).map_err(|_| {
            Error::input(
                Location::line(path, line).at_column(column, name),
                Problem::InvalidUtf8,
            )
        })?;
        cells.push(text.to_string());
    }
    Ok(cells)
}
