//! Reading and writing NumPy `.npy` files holding a 2-D float32 or float64 array.
//!
//! Format (NumPy's NEP 1 / `numpy.lib.format`): the magic `\x93NUMPY`, a major and minor
//! version byte, the header length (u16 little-endian in version 1, u32 in versions 2
//! and 3), then a Python dict literal with `descr`, `fortran_order` and `shape`, padded
//! with spaces and a newline, followed by the raw array data.

use std::io::{Read, Write};

/// The magic bytes that open every `.npy` file.
pub const MAGIC: &[u8] = b"\x93NUMPY";

/// Element type of an `.npy` array that flipmend reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dtype {
    /// 32-bit IEEE float.
    F32,
    /// 64-bit IEEE float.
    F64,
}

impl Dtype {
    /// Bytes per element.
    pub fn size(self) -> usize {
        match self {
            Dtype::F32 => 4,
            Dtype::F64 => 8,
        }
    }
}

/// A parsed `.npy` header.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NpyHeader {
    /// The `descr` text, e.g. `<f8`.
    pub descr: String,
    /// The element type, when it is one flipmend reads.
    pub dtype: Option<Dtype>,
    /// True for big-endian data.
    pub big_endian: bool,
    /// True when the data is stored column by column.
    pub fortran_order: bool,
    /// The array's shape.
    pub shape: Vec<u64>,
}

/// Why a header could not be read.
pub type HeaderError = String;

/// Reads the preamble and header, leaving `reader` at the first data byte. Returns the
/// header and the number of bytes consumed.
pub fn read_header<R: Read>(reader: &mut R) -> Result<(NpyHeader, u64), HeaderError> {
    let mut preamble = [0u8; 8];
    reader
        .read_exact(&mut preamble)
        .map_err(|_| "the file is shorter than an .npy preamble".to_string())?;
    if &preamble[..6] != MAGIC {
        return Err("the file does not start with the .npy magic bytes".into());
    }
    let (len, consumed) = match preamble[6] {
        1 => {
            let mut b = [0u8; 2];
            reader
                .read_exact(&mut b)
                .map_err(|_| "truncated header length".to_string())?;
            (u16::from_le_bytes(b) as usize, 10)
        }
        2 | 3 => {
            let mut b = [0u8; 4];
            reader
                .read_exact(&mut b)
                .map_err(|_| "truncated header length".to_string())?;
            (u32::from_le_bytes(b) as usize, 12)
        }
        v => return Err(format!("unknown .npy format version {v}")),
    };
    if len > 1 << 20 {
        return Err(format!(
            "the header claims {len} bytes, more than any real .npy header"
        ));
    }
    let mut text = vec![0u8; len];
    reader
        .read_exact(&mut text)
        .map_err(|_| "the header is cut short".to_string())?;
    let text = String::from_utf8(text).map_err(|_| "the header is not text".to_string())?;
    Ok((parse_header_dict(&text)?, (consumed + len) as u64))
}

/// Parses the header's dict literal.
fn parse_header_dict(text: &str) -> Result<NpyHeader, HeaderError> {
    let mut lexer = Lexer { rest: text.trim() };
    lexer.expect('{')?;
    let (mut descr, mut fortran, mut shape) = (None, None, None);
    loop {
        if lexer.eat('}') {
            break;
        }
        let key = lexer.string()?;
        lexer.expect(':')?;
        match key.as_str() {
            "descr" => descr = Some(lexer.string()?),
            "fortran_order" => fortran = Some(lexer.boolean()?),
            "shape" => shape = Some(lexer.tuple()?),
            other => return Err(format!("unexpected header key '{other}'")),
        }
        if !lexer.eat(',') {
            lexer.expect('}')?;
            break;
        }
    }
    let descr = descr.ok_or("the header has no 'descr'")?;
    let fortran_order = fortran.ok_or("the header has no 'fortran_order'")?;
    let shape = shape.ok_or("the header has no 'shape'")?;
    let (dtype, big_endian) = dtype_of(&descr);
    Ok(NpyHeader {
        descr,
        dtype,
        big_endian,
        fortran_order,
        shape,
    })
}

fn dtype_of(descr: &str) -> (Option<Dtype>, bool) {
    let native_big = cfg!(target_endian = "big");
    let (order, kind) = descr.split_at(descr.len().min(1));
    let big = match order {
        "<" => false,
        ">" => true,
        "=" => native_big,
        _ => return (None, false),
    };
    let dtype = match kind {
        "f4" => Some(Dtype::F32),
        "f8" => Some(Dtype::F64),
        _ => None,
    };
    (dtype, big)
}

struct Lexer<'a> {
    rest: &'a str,
}

impl Lexer<'_> {
    fn skip(&mut self) {
        self.rest = self.rest.trim_start();
    }

    fn eat(&mut self, c: char) -> bool {
        self.skip();
        match self.rest.strip_prefix(c) {
            Some(r) => {
                self.rest = r;
                true
            }
            None => false,
        }
    }

    fn expect(&mut self, c: char) -> Result<(), HeaderError> {
        if self.eat(c) {
            Ok(())
        } else {
            Err(format!(
                "expected '{c}' in the header near '{}'",
                self.rest.chars().take(20).collect::<String>()
            ))
        }
    }

    fn string(&mut self) -> Result<String, HeaderError> {
        self.skip();
        let quote = self
            .rest
            .chars()
            .next()
            .filter(|c| *c == '\'' || *c == '"')
            .ok_or("expected a quoted string in the header")?;
        let body = &self.rest[1..];
        let end = body
            .find(quote)
            .ok_or("a string in the header never closes")?;
        self.rest = &body[end + 1..];
        Ok(body[..end].to_string())
    }

    fn boolean(&mut self) -> Result<bool, HeaderError> {
        self.skip();
        for (word, value) in [("True", true), ("False", false)] {
            if let Some(r) = self.rest.strip_prefix(word) {
                self.rest = r;
                return Ok(value);
            }
        }
        Err("fortran_order must be True or False".into())
    }

    fn tuple(&mut self) -> Result<Vec<u64>, HeaderError> {
        self.expect('(')?;
        let mut dims = Vec::new();
        loop {
            if self.eat(')') {
                return Ok(dims);
            }
            self.skip();
            let digits = self
                .rest
                .find(|c: char| !c.is_ascii_digit())
                .unwrap_or(self.rest.len());
            let dim = self.rest[..digits]
                .parse::<u64>()
                .map_err(|_| "the shape must be a tuple of whole numbers".to_string())?;
            dims.push(dim);
            self.rest = &self.rest[digits..];
            if !self.eat(',') {
                self.expect(')')?;
                return Ok(dims);
            }
        }
    }
}

/// Fills `buf` as far as the stream allows (a short read is not the end); returns how
/// many bytes were read.
pub(crate) fn read_up_to<R: Read>(reader: &mut R, buf: &mut [u8]) -> std::io::Result<usize> {
    let mut n = 0;
    while n < buf.len() {
        match reader.read(&mut buf[n..])? {
            0 => break,
            k => n += k,
        }
    }
    Ok(n)
}

/// Writes a row-major `rows × cols` float array as a version 1.0 `.npy` file.
pub fn write_2d<W: Write, T: NpyFloat>(
    writer: &mut W,
    rows: usize,
    cols: usize,
    values: &[T],
) -> std::io::Result<()> {
    assert_eq!(
        values.len(),
        rows * cols,
        "write_2d: values do not match the shape"
    );
    let dict = format!(
        "{{'descr': '{}', 'fortran_order': False, 'shape': ({rows}, {cols}), }}",
        T::DESCR
    );
    // Pad so that the data starts on a 64-byte boundary, as NumPy does.
    let unpadded = MAGIC.len() + 2 + 2 + dict.len() + 1;
    let padding = (64 - unpadded % 64) % 64;
    let header = format!("{dict}{}\n", " ".repeat(padding));
    writer.write_all(MAGIC)?;
    writer.write_all(&[1, 0])?;
    writer.write_all(&(header.len() as u16).to_le_bytes())?;
    writer.write_all(header.as_bytes())?;
    let mut buf = Vec::with_capacity(64 * 1024);
    for chunk in values.chunks(8 * 1024) {
        buf.clear();
        for v in chunk {
            v.put_le(&mut buf);
        }
        writer.write_all(&buf)?;
    }
    Ok(())
}

/// A float type that `.npy` files can hold.
pub trait NpyFloat: Copy {
    /// NumPy's descriptor, little-endian.
    const DESCR: &'static str;
    /// Appends the little-endian bytes.
    fn put_le(self, out: &mut Vec<u8>);
}

impl NpyFloat for f32 {
    const DESCR: &'static str = "<f4";
    fn put_le(self, out: &mut Vec<u8>) {
        out.extend_from_slice(&self.to_le_bytes());
    }
}

impl NpyFloat for f64 {
    const DESCR: &'static str = "<f8";
    fn put_le(self, out: &mut Vec<u8>) {
        out.extend_from_slice(&self.to_le_bytes());
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_written_is_header_read() {
        let mut bytes = Vec::new();
        write_2d(&mut bytes, 2, 3, &[0.5f32, 0.25, 0.25, 1.0, 0.0, 0.0]).unwrap();
        assert_eq!(bytes.len() % 64, 24, "data after a 64-byte aligned header");
        let (header, consumed) = read_header(&mut &bytes[..]).unwrap();
        assert_eq!(consumed % 64, 0);
        assert_eq!(header.dtype, Some(Dtype::F32));
        assert_eq!(header.shape, vec![2, 3]);
        assert!(!header.fortran_order && !header.big_endian);
    }

    #[test]
    fn parses_numpy_style_headers() {
        // Header text as numpy 1.x and 2.x write it (numpy.lib.format; from its docs).
        let h = parse_header_dict("{'descr': '>f8', 'fortran_order': True, 'shape': (10, 3), }   ")
            .unwrap();
        assert_eq!(
            (h.dtype, h.big_endian, h.fortran_order, h.shape),
            (Some(Dtype::F64), true, true, vec![10, 3])
        );
        let h =
            parse_header_dict("{'descr': '<i8', 'fortran_order': False, 'shape': (7,)}").unwrap();
        assert_eq!((h.dtype, h.shape), (None, vec![7]));
    }

    #[test]
    fn malformed_headers_are_errors() {
        for text in [
            "",
            "{",
            "{'descr': '<f8'}",
            "{'shape': (1, x)}",
            "{'descr': <f8}",
        ] {
            assert!(parse_header_dict(text).is_err(), "{text}");
        }
        assert!(read_header(&mut &b"\x93NUMPZ\x01\x00"[..]).is_err());
    }
}
