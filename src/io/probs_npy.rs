//! The body of a probability `.npy` file: a `rows × classes` float array checked against
//! the dataset's shape, decoded on every core with each value's range checked as it is
//! decoded (the header itself is [`crate::io::npy`]).

use std::io::Read;
use std::path::Path;

use ndarray::Array2;
use rayon::prelude::*;

use crate::data::probs::{checked, Loaded};
use crate::data::Dataset;
use crate::error::{Error, Location, Problem, Result};
use crate::io::npy::{self, read_up_to, Dtype};

/// Elements per read of an `.npy` body (16 MiB of f32).
const NPY_READ_ELEMENTS: usize = 1 << 22;
/// Elements per parallel work item when decoding.
const DECODE_CHUNK: usize = 1 << 16;

fn total_elements(rows: usize, classes: usize) -> usize {
    rows.saturating_mul(classes)
}

/// (row, column) of the `element`-th stored value.
fn position(element: usize, rows: usize, classes: usize, fortran_order: bool) -> (usize, usize) {
    if fortran_order {
        (element % rows, element / rows)
    } else {
        (element / classes, element % classes)
    }
}

/// Decodes `bytes` into `out` on every core, each value through [`checked`]; returns the
/// offset and the problem of the first value out of range. The element reader is chosen
/// once, outside the loop (a match per element made decoding about a third slower).
fn decode_checked(
    bytes: &[u8],
    dtype: Dtype,
    big_endian: bool,
    out: &mut [f32],
) -> Option<(usize, Problem)> {
    fn run(
        bytes: &[u8],
        size: usize,
        out: &mut [f32],
        read: impl Fn(&[u8]) -> f64 + Sync,
    ) -> Option<(usize, Problem)> {
        out.par_chunks_mut(DECODE_CHUNK)
            .zip(bytes.par_chunks(DECODE_CHUNK * size))
            .enumerate()
            .find_map_first(|(chunk, (out, bytes))| {
                for (i, (dst, element)) in out.iter_mut().zip(bytes.chunks_exact(size)).enumerate()
                {
                    let value = read(element);
                    match checked(value, || value.to_string()) {
                        Ok(v) => *dst = v,
                        Err(problem) => return Some((chunk * DECODE_CHUNK + i, problem)),
                    }
                }
                None
            })
    }
    let size = dtype.size();
    let four = |b: &[u8]| -> [u8; 4] { b.try_into().unwrap_or([0; 4]) };
    let eight = |b: &[u8]| -> [u8; 8] { b.try_into().unwrap_or([0; 8]) };
    match (dtype, big_endian) {
        (Dtype::F32, false) => run(bytes, size, out, |b| f32::from_le_bytes(four(b)) as f64),
        (Dtype::F32, true) => run(bytes, size, out, |b| f32::from_be_bytes(four(b)) as f64),
        (Dtype::F64, false) => run(bytes, size, out, |b| f64::from_le_bytes(eight(b))),
        (Dtype::F64, true) => run(bytes, size, out, |b| f64::from_be_bytes(eight(b))),
    }
}

/// Reads a probability `.npy` stream for `data`; `size` is the file's length when known
/// (a stream's is not, so then trailing bytes are looked for instead). Rows are not yet
/// checked to sum to 1.
pub(crate) fn read_probs_npy<'a, R: Read>(
    mut reader: R,
    path: &'a Path,
    size: Option<u64>,
    data: &Dataset,
) -> Result<Loaded<'a>> {
    let file_err = |problem| Error::input(Location::file(path), problem);
    let (header, consumed) =
        npy::read_header(&mut reader).map_err(|detail| file_err(Problem::NpyHeader { detail }))?;
    let body = size.map(|size| size.saturating_sub(consumed));
    let (dtype, expected) = check_header(&header, body, data).map_err(file_err)?;
    let values = read_body(&mut reader, path, &header, dtype, data)?;
    let mut extra = [0u8; 1];
    if size.is_none() && read_up_to(&mut reader, &mut extra).unwrap_or(0) > 0 {
        return Err(file_err(Problem::NpySize {
            expected,
            found: expected + 1,
        }));
    }
    Ok(Loaded {
        path,
        values,
        lines: None,
        warnings: Vec::new(),
    })
}

/// Checks the header against the dataset: a float type, the shape `rows × classes` and,
/// when the file's length is known, a body of exactly that many values. Returns the
/// element type and the body's expected size in bytes.
fn check_header(
    header: &npy::NpyHeader,
    body: Option<u64>,
    data: &Dataset,
) -> std::result::Result<(Dtype, u64), Problem> {
    let dtype = header.dtype.ok_or_else(|| Problem::NpyDtype {
        descr: header.descr.clone(),
    })?;
    let (rows, classes) = (data.rows(), data.classes.len());
    if header.shape != [rows as u64, classes as u64] {
        let dims: Vec<String> = header.shape.iter().map(u64::to_string).collect();
        let shape = format!(
            "({}{})",
            dims.join(", "),
            if dims.len() == 1 { "," } else { "" }
        );
        return Err(Problem::NpyShape {
            shape,
            rows,
            classes,
        });
    }
    let expected = (rows * classes * dtype.size()) as u64;
    match body {
        Some(found) if found != expected => Err(Problem::NpySize { expected, found }),
        _ => Ok((dtype, expected)),
    }
}

/// Reads and decodes the body in large reads, each decoded on every core: a 400 MB array
/// is read at the speed of the disk cache instead of one element at a time.
fn read_body<R: Read>(
    reader: &mut R,
    path: &Path,
    header: &npy::NpyHeader,
    dtype: Dtype,
    data: &Dataset,
) -> Result<Array2<f32>> {
    let (rows, classes) = (data.rows(), data.classes.len());
    let expected = (rows * classes * dtype.size()) as u64;
    let mut values = Array2::<f32>::zeros((rows, classes));
    let flat = values
        .as_slice_mut()
        .ok_or_else(|| Error::Internal("probability array not contiguous".into()))?;
    let mut buf =
        vec![0u8; NPY_READ_ELEMENTS.min(total_elements(rows, classes)).max(1) * dtype.size()];
    let mut decoded = Vec::new();
    let mut element = 0usize;
    let total = rows * classes;
    while element < total {
        let want = ((total - element) * dtype.size()).min(buf.len());
        let got = read_up_to(reader, &mut buf[..want]).map_err(|source| Error::Read {
            path: path.to_path_buf(),
            source,
        })?;
        if got < want {
            let found = (element * dtype.size() + got) as u64;
            let problem = Problem::NpySize { expected, found };
            return Err(Error::input(Location::file(path), problem));
        }
        let count = want / dtype.size();
        let target = if header.fortran_order {
            decoded.resize(count, 0.0);
            &mut decoded[..]
        } else {
            &mut flat[element..element + count]
        };
        if let Some((bad, problem)) = decode_checked(&buf[..want], dtype, header.big_endian, target)
        {
            let (row, col) = position(element + bad, rows, classes, header.fortran_order);
            return Err(Error::input(
                Location::row(path, row).at_column(col, &data.classes[col]),
                problem,
            ));
        }
        if header.fortran_order {
            for (i, &v) in decoded.iter().enumerate() {
                let (row, col) = position(element + i, rows, classes, true);
                flat[row * classes + col] = v;
            }
        }
        element += count;
    }
    Ok(values)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::{ProbOptions, Probabilities};

    fn data(text: &str) -> Dataset {
        Dataset::from_csv_text(text)
    }

    /// Replaces the first occurrence of `from` with `to` (same length) in a header.
    fn replace_bytes(bytes: &mut [u8], from: &[u8], to: &[u8]) {
        let at = bytes.windows(from.len()).position(|w| w == from).unwrap();
        bytes[at..at + to.len()].copy_from_slice(to);
    }

    #[test]
    fn npy_f64_and_fortran_order() {
        let d = data("x,label\n1,a\n2,b\n3,a\n");
        let rows = [[0.9, 0.1], [0.2, 0.8], [0.6, 0.4]];
        let flat: Vec<f64> = rows.iter().flatten().copied().collect();
        let mut bytes = Vec::new();
        npy::write_2d(&mut bytes, 3, 2, &flat).unwrap();
        let p = Probabilities::from_npy_reader(
            &bytes[..],
            Path::new("p.npy"),
            &d,
            &ProbOptions::default(),
        )
        .unwrap();
        assert_eq!(p.values[[1, 1]], 0.8f32);
        // The same array stored column by column.
        let column_major: Vec<f64> = (0..2)
            .flat_map(|c| rows.iter().map(move |r| r[c]))
            .collect();
        let mut f = Vec::new();
        npy::write_2d(&mut f, 3, 2, &column_major).unwrap();
        replace_bytes(&mut f, b"False", b"True ");
        let q =
            Probabilities::from_npy_reader(&f[..], Path::new("p.npy"), &d, &ProbOptions::default())
                .unwrap();
        assert_eq!(p.values, q.values);
    }

    #[test]
    fn npy_errors() {
        let d = data("x,label\n1,a\n2,b\n3,a\n");
        let load = |bytes: &[u8]| {
            Probabilities::from_npy_reader(bytes, Path::new("p.npy"), &d, &ProbOptions::default())
                .unwrap_err()
                .to_string()
        };
        let mut wrong_shape = Vec::new();
        npy::write_2d(&mut wrong_shape, 2, 2, &[0.5f32; 4]).unwrap();
        assert!(load(&wrong_shape).contains("shape (2, 2); expected (3, 2)"));
        let mut short = Vec::new();
        npy::write_2d(&mut short, 3, 2, &[0.5f32; 6]).unwrap();
        short.truncate(short.len() - 3);
        assert!(load(&short).contains("the .npy data has 21 bytes but its header announces 24"));
        let mut ints_bytes = wrong_shape.clone();
        replace_bytes(&mut ints_bytes, b"<f4", b"<i4");
        let msg = load(&ints_bytes);
        assert!(msg.contains("holds '<i4'"), "{msg}");
        let mut bad_value = Vec::new();
        npy::write_2d(&mut bad_value, 3, 2, &[0.5f32, 0.5, 0.5, 0.5, 2.0, -1.0]).unwrap();
        assert!(
            load(&bad_value).contains("p.npy, row 2, column 1 'a': the probability 2 is outside")
        );
        assert!(load(b"garbage").contains("not a readable .npy file"));
    }

    #[test]
    fn npy_bad_values_are_located_past_the_first_decoding_chunk() {
        // 70,000 rows × 2 classes is more than one decoding chunk; the first bad value in
        // file order is the one named, in C and in Fortran order.
        let rows = 70_000;
        let mut text = String::from("x,label\n");
        for r in 0..rows {
            text.push_str(if r % 2 == 0 { "1,a\n" } else { "2,b\n" });
        }
        let d = data(&text);
        let load = |bytes: &[u8]| {
            Probabilities::from_npy_reader(bytes, Path::new("p.npy"), &d, &ProbOptions::default())
                .unwrap_err()
                .to_string()
        };
        let mut c_order = vec![0.5f32; rows * 2];
        c_order[50_000 * 2 + 1] = 1.5;
        c_order[69_999 * 2] = -1.0;
        let mut bytes = Vec::new();
        npy::write_2d(&mut bytes, rows, 2, &c_order).unwrap();
        let message = load(&bytes);
        assert!(
            message.contains("row 50000, column 2 'b': the probability 1.5"),
            "{message}"
        );
        let mut f_order = vec![0.5f32; rows * 2];
        f_order[rows + 50_000] = 1.5;
        f_order[69_999] = -1.0;
        let mut bytes = Vec::new();
        npy::write_2d(&mut bytes, rows, 2, &f_order).unwrap();
        replace_bytes(&mut bytes, b"False", b"True ");
        let message = load(&bytes);
        assert!(
            message.contains("row 69999, column 1 'a': the probability -1"),
            "{message}"
        );
    }
}
