//! Arrow arrays read as flipmend's cells: text for the role columns (labels, trusted
//! labels, sources, ids), numbers for features and probabilities. Integer class codes
//! read as their decimal text, so a Parquet label column of 0..9 gives the classes
//! "0".."9", as the same table in CSV would.

use std::io::Write;

use arrow_array::cast::AsArray;
use arrow_array::types::{
    Float16Type, Float32Type, Float64Type, Int16Type, Int32Type, Int64Type, Int8Type, UInt16Type,
    UInt32Type, UInt64Type, UInt8Type,
};
use arrow_array::{Array, BooleanArray, GenericStringArray, PrimitiveArray, StringViewArray};
use arrow_buffer::NullBuffer;

/// A column whose cells read as text.
pub(crate) enum Text<'a> {
    Utf8(&'a GenericStringArray<i32>),
    LargeUtf8(&'a GenericStringArray<i64>),
    View(&'a StringViewArray),
    Bool(&'a BooleanArray),
    /// Integers of any width, widened.
    Int(Vec<Option<i64>>),
    UInt(Vec<Option<u64>>),
    /// Dictionary-encoded: each row's key into `values`.
    Dict {
        keys: Vec<usize>,
        nulls: Option<NullBuffer>,
        values: Box<Text<'a>>,
    },
}

impl<'a> Text<'a> {
    /// The column as text, or `None` when its type has no text reading (floats, lists…).
    pub(crate) fn of(array: &'a dyn Array) -> Option<Self> {
        if let Some(a) = array.as_string_opt::<i32>() {
            return Some(Text::Utf8(a));
        }
        if let Some(a) = array.as_string_opt::<i64>() {
            return Some(Text::LargeUtf8(a));
        }
        if let Some(a) = array.as_string_view_opt() {
            return Some(Text::View(a));
        }
        if let Some(a) = array.as_boolean_opt() {
            return Some(Text::Bool(a));
        }
        if let Some(dict) = array.as_any_dictionary_opt() {
            return Some(Text::Dict {
                keys: dict.normalized_keys(),
                nulls: dict.logical_nulls(),
                values: Box::new(Text::of(dict.values().as_ref())?),
            });
        }
        signed(array)
            .map(Text::Int)
            .or_else(|| unsigned(array).map(Text::UInt))
    }

    /// Writes row `i`'s text into `out` (cleared first); a null writes nothing, so it
    /// reads like an empty CSV cell.
    pub(crate) fn cell(&self, i: usize, out: &mut Vec<u8>) {
        out.clear();
        match self {
            Text::Utf8(a) => push_str(*a, i, out),
            Text::LargeUtf8(a) => push_str(*a, i, out),
            Text::View(a) => {
                if a.is_valid(i) {
                    out.extend_from_slice(a.value(i).as_bytes());
                }
            }
            Text::Bool(a) => {
                if a.is_valid(i) {
                    out.extend_from_slice(if a.value(i) { b"true" } else { b"false" });
                }
            }
            Text::Int(v) => {
                if let Some(x) = v[i] {
                    let _ = write!(out, "{x}");
                }
            }
            Text::UInt(v) => {
                if let Some(x) = v[i] {
                    let _ = write!(out, "{x}");
                }
            }
            Text::Dict {
                keys,
                nulls,
                values,
            } => {
                if nulls.as_ref().is_none_or(|n| n.is_valid(i)) {
                    values.cell(keys[i], out);
                }
            }
        }
    }
}

fn push_str<O: arrow_array::OffsetSizeTrait>(
    a: &GenericStringArray<O>,
    i: usize,
    out: &mut Vec<u8>,
) {
    if a.is_valid(i) {
        out.extend_from_slice(a.value(i).as_bytes());
    }
}

fn widen<T, N>(a: &PrimitiveArray<T>, f: impl Fn(T::Native) -> N) -> Vec<Option<N>>
where
    T: arrow_array::ArrowPrimitiveType,
{
    a.iter().map(|v| v.map(&f)).collect()
}

fn signed(array: &dyn Array) -> Option<Vec<Option<i64>>> {
    if let Some(a) = array.as_primitive_opt::<Int8Type>() {
        return Some(widen(a, i64::from));
    }
    if let Some(a) = array.as_primitive_opt::<Int16Type>() {
        return Some(widen(a, i64::from));
    }
    if let Some(a) = array.as_primitive_opt::<Int32Type>() {
        return Some(widen(a, i64::from));
    }
    array
        .as_primitive_opt::<Int64Type>()
        .map(|a| widen(a, |v| v))
}

fn unsigned(array: &dyn Array) -> Option<Vec<Option<u64>>> {
    if let Some(a) = array.as_primitive_opt::<UInt8Type>() {
        return Some(widen(a, u64::from));
    }
    if let Some(a) = array.as_primitive_opt::<UInt16Type>() {
        return Some(widen(a, u64::from));
    }
    if let Some(a) = array.as_primitive_opt::<UInt32Type>() {
        return Some(widen(a, u64::from));
    }
    array
        .as_primitive_opt::<UInt64Type>()
        .map(|a| widen(a, |v| v))
}

/// Calls `put(row, value)` for every non-null cell of a numeric column (any integer or
/// float type, as f64), and returns the column's nulls; `None` when the column is not
/// numeric. Integers beyond 2^53 round, as they would when parsed from CSV text.
pub(crate) fn for_each_number(
    array: &dyn Array,
    mut put: impl FnMut(usize, f64),
) -> Option<Option<NullBuffer>> {
    macro_rules! try_type {
        ($t:ty, $to:expr) => {
            if let Some(a) = array.as_primitive_opt::<$t>() {
                let to = $to;
                match a.nulls() {
                    None => a
                        .values()
                        .iter()
                        .enumerate()
                        .for_each(|(i, &v)| put(i, to(v))),
                    Some(nulls) => a
                        .values()
                        .iter()
                        .enumerate()
                        .filter(|(i, _)| nulls.is_valid(*i))
                        .for_each(|(i, &v)| put(i, to(v))),
                }
                return Some(a.nulls().cloned());
            }
        };
    }
    try_type!(Float64Type, |v: f64| v);
    try_type!(Float32Type, f64::from);
    try_type!(Int64Type, |v: i64| v as f64);
    try_type!(Int32Type, f64::from);
    try_type!(Int16Type, f64::from);
    try_type!(Int8Type, f64::from);
    try_type!(UInt64Type, |v: u64| v as f64);
    try_type!(UInt32Type, f64::from);
    try_type!(UInt16Type, f64::from);
    try_type!(UInt8Type, f64::from);
    try_type!(
        Float16Type,
        |v: <Float16Type as arrow_array::ArrowPrimitiveType>::Native| v.to_f64()
    );
    None
}

/// A numeric column as f64 values, borrowed when it is stored as Float64 and else
/// converted into `buf`; null positions hold unspecified values (check the nulls). `None`
/// when the column is not numeric.
pub(crate) fn dense<'a>(
    array: &'a dyn Array,
    buf: &'a mut Vec<f64>,
) -> Option<(&'a [f64], Option<NullBuffer>)> {
    if let Some(a) = array.as_primitive_opt::<Float64Type>() {
        return Some((a.values().as_ref(), a.nulls().cloned()));
    }
    buf.clear();
    buf.resize(array.len(), f64::NAN);
    let nulls = for_each_number(array, |i, v| buf[i] = v)?;
    Some((&buf[..], nulls))
}

/// The column's type in words, for messages.
pub(crate) fn type_words(array: &dyn Array) -> String {
    format!("{} values", array.data_type())
}

#[cfg(test)]
mod tests {
    use super::*;
    use arrow_array::{DictionaryArray, Float32Array, Int64Array, StringArray};

    fn texts(array: &dyn Array) -> Vec<String> {
        let text = Text::of(array).unwrap();
        let mut buf = Vec::new();
        (0..array.len())
            .map(|i| {
                text.cell(i, &mut buf);
                String::from_utf8(buf.clone()).unwrap()
            })
            .collect()
    }

    #[test]
    fn strings_dictionaries_and_integers_read_as_text_with_nulls_empty() {
        let plain = StringArray::from(vec![Some("cat"), None, Some("dog")]);
        assert_eq!(texts(&plain), ["cat", "", "dog"]);
        let dict: DictionaryArray<arrow_array::types::Int8Type> =
            vec![Some("b"), Some("a"), None, Some("b")]
                .into_iter()
                .collect();
        assert_eq!(texts(&dict), ["b", "a", "", "b"]);
        let ints = Int64Array::from(vec![Some(3), None, Some(-1)]);
        assert_eq!(texts(&ints), ["3", "", "-1"]);
        assert!(Text::of(&Float32Array::from(vec![1.0])).is_none());
    }

    #[test]
    fn numbers_of_any_width_with_their_nulls() {
        let mut seen = Vec::new();
        let floats = Float32Array::from(vec![Some(0.5), None, Some(2.0)]);
        let nulls = for_each_number(&floats, |i, v| seen.push((i, v))).unwrap();
        assert_eq!(seen, [(0, 0.5), (2, 2.0)]);
        assert_eq!(nulls.unwrap().null_count(), 1);
        let mut ints = Vec::new();
        for_each_number(&Int64Array::from(vec![7, -2]), |_, v| ints.push(v)).unwrap();
        assert_eq!(ints, [7.0, -2.0]);
        assert!(for_each_number(&StringArray::from(vec!["x"]), |_, _| {}).is_none());
    }
}
