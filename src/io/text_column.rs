//! Reading one column of a table as text, for columns outside the main roles (such as
//! the `--truth` column of a synthetic benchmark). A plain sequential pass: these are
//! aids, not the hot path.

use std::path::Path;

use crate::error::{Error, Location, Problem, Result};
use crate::io::csv_source::CsvFormat;

/// The cells of column `name` in data-row order.
pub fn read_text_column(path: &Path, delimiter: u8, name: &str) -> Result<Vec<String>> {
    let mut rdr = CsvFormat { delimiter }.open(path)?;
    let syntax = crate::error::csv_syntax(path);
    let mut record = csv::ByteRecord::new();
    // An empty file has an empty header, which has no column of any name.
    rdr.read_byte_record(&mut record).map_err(syntax)?;
    let column = record
        .iter()
        .position(|h| String::from_utf8_lossy(h).trim() == name)
        .ok_or_else(|| Error::Usage(format!("{}: no column named '{name}'", path.display())))?;
    let mut cells = Vec::new();
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
