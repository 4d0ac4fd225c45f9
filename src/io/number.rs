//! Numbers in text cells. The common table cell (a short decimal) is read by an exact
//! fast path of our own; everything else by fast-float2. Both round exactly like the
//! standard library.
//!
//! Why the fast path stays, measured (2026-12-03, 2 cores, otherwise idle):
//! `cargo bench --bench load` prints both parsers side by side on 1,000,000 `{:.6}` cells
//! ("cell parser" lines): 18.9 ns ours against 18.2 ns for fast-float2's `parse_partial`,
//! a tie on whole cells. But the plain-row parser reads each number straight from the
//! line ([`parse_short_prefix`]), and there it wins: the same bench's 200,000 × 32 table
//! with fast-float2's `parse_partial` in its place (two bench binaries run alternately,
//! 8 runs each) loaded in 0.208 s against 0.193 s (mean of the medians; fastest runs
//! 0.165 against 0.158 s). Re-measure before changing either.

/// Parses a whole cell as a decimal number (`1.5`, `-2e-3`, `+7`, `inf`, `NaN`, …).
/// fast-float2 implements the Eisel–Lemire algorithm straight from bytes, skipping the
/// UTF-8 check that `str::parse` needs; it rounds exactly like the standard library.
pub fn parse_f64(text: &[u8]) -> Option<f64> {
    if let Some(value) = parse_short_decimal(text) {
        return Some(value);
    }
    match fast_float2::parse_partial::<f64, _>(text) {
        Ok((value, used)) if used == text.len() => Some(value),
        _ => None,
    }
}

/// Exact powers of ten that an f64 holds without rounding.
const POW10: [f64; 23] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
    1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
];

/// The common case of a table cell, `[-+]digits[.digits][e[-+]digits]` with at most 15
/// significant digits and a decimal exponent within ±22, by Clinger's exact fast path:
/// the digits form an integer below 2^53 and the power of ten is exact, so the single
/// multiplication or division rounds correctly (W. D. Clinger, "How to read floating
/// point numbers accurately", PLDI 1990). Anything else returns `None` for the general
/// parser.
fn parse_short_decimal(text: &[u8]) -> Option<f64> {
    parse_short_prefix(text)
        .filter(|&(_, used)| used == text.len())
        .map(|(value, _)| value)
}

/// [`parse_short_decimal`] on the start of `text`: the value and the bytes it used.
#[inline]
pub(crate) fn parse_short_prefix(text: &[u8]) -> Option<(f64, usize)> {
    let n = text.len();
    let first = *text.first()?;
    let negative = first == b'-';
    let mut i = usize::from(first == b'-' || first == b'+');
    let (mantissa, int_digits) = digit_run(text, i, 0);
    i += int_digits;
    let mut digits = int_digits;
    let mut mantissa = mantissa;
    let mut exponent: i64 = 0;
    if i < n && text[i] == b'.' {
        let (m, frac_digits) = digit_run(text, i + 1, mantissa);
        mantissa = m;
        i += 1 + frac_digits;
        digits += frac_digits;
        exponent = -(frac_digits as i64);
    }
    // 15 digits keep the (wrapping) accumulation exact and below 2^53.
    if digits == 0 || digits > 15 {
        return None;
    }
    if i < n && (text[i] | 0x20) == b'e' {
        i += 1;
        let sign = text.get(i).copied();
        i += usize::from(matches!(sign, Some(b'-' | b'+')));
        let (e, exp_digits) = digit_run(text, i, 0);
        if exp_digits == 0 || exp_digits > 4 {
            return None;
        }
        i += exp_digits;
        exponent += if sign == Some(b'-') {
            -(e as i64)
        } else {
            e as i64
        };
    }
    if exponent.unsigned_abs() > 22 {
        return None;
    }
    let magnitude = mantissa as f64;
    let value = if exponent >= 0 {
        magnitude * POW10[exponent as usize]
    } else {
        magnitude / POW10[(-exponent) as usize]
    };
    // The sign goes in as a bit, not a branch (the magnitude is never negative): signs
    // in a column are as unpredictable as coin flips. Measured (2026-12-05, the same
    // one-core runs as `digit_run`'s): median 0.705 s against 0.765 s with the branch.
    let signed = f64::from_bits(value.to_bits() | (u64::from(negative) << 63));
    Some((signed, i))
}

/// Accumulates the ASCII digits from `start` onto `acc` (wrapping on overflow; callers
/// bound the digit count). Returns the value and how many digits were read.
///
/// A byte at a time: eight bytes at a time (a word's digits found and combined by
/// integer operations, the SWAR reduction of D. Lemire, "Fast float parsing in
/// practice", 2021) measured slower here, numbers of a table being short (2026-12-05,
/// `flipmend inspect` of the 1,000,000 × 32 file of `benches/vs_pandas_load.sh` on one
/// core, binaries alternated, 8 runs each: median 0.745 s with words against 0.71 s).
#[inline(always)]
fn digit_run(text: &[u8], start: usize, mut acc: u64) -> (u64, usize) {
    let mut i = start;
    while i < text.len() {
        let d = text[i].wrapping_sub(b'0');
        if d > 9 {
            break;
        }
        acc = acc.wrapping_mul(10).wrapping_add(u64::from(d));
        i += 1;
    }
    (acc, i - start)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn number_syntax_matches_the_standard_library() {
        let cases = [
            "1.5",
            "-2e-3",
            "+7",
            "1e308",
            "4.9e-324",
            "0.1",
            ".5",
            "5.",
            "inf",
            "-Infinity",
            "NaN",
            "1_0",
            "1,5",
            "0x10",
            "1e",
            "",
            "--1",
            " 1",
            "1 ",
        ];
        for case in cases {
            let ours = parse_f64(case.as_bytes());
            let std = case.parse::<f64>().ok();
            assert_eq!(ours.map(f64::to_bits), std.map(f64::to_bits), "{case:?}");
        }
    }

    #[test]
    fn short_decimals_round_exactly_like_the_standard_library() {
        // A deterministic spread of 6- to 15-digit decimals, both exponent forms.
        let mut state: u64 = 0x9E37_79B9_7F4A_7C15;
        for _ in 0..200_000 {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            let digits = 1 + (state % 15) as usize;
            let mantissa = (state >> 8) % 10u64.pow(digits as u32);
            let exp = ((state >> 40) % 45) as i32 - 22;
            for text in [
                format!("{mantissa}e{exp}"),
                format!(
                    "-{}.{:0>width$}",
                    mantissa / 1000,
                    mantissa % 1000,
                    width = 3
                ),
            ] {
                let ours = parse_short_decimal(text.as_bytes());
                if let Some(v) = ours {
                    assert_eq!(
                        v.to_bits(),
                        text.parse::<f64>().unwrap().to_bits(),
                        "{text}"
                    );
                }
            }
        }
        assert_eq!(
            parse_short_decimal(b"-0").map(f64::to_bits),
            Some((-0.0f64).to_bits())
        );
        assert_eq!(parse_short_decimal(b"1.23457e-05"), Some(1.23457e-05));
        assert_eq!(
            parse_short_decimal(b"1234567890123456"),
            None,
            "16 digits go to the general parser"
        );
    }
}
