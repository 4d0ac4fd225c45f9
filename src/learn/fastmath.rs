//! Branch-free exponential and logarithm. Written without calls or branches (selects
//! only), so that a loop over a row's logits or over a block of rows is evaluated in
//! vector registers, where the library functions are calls the compiler cannot
//! vectorise. Softmax and the fitting kernel (`learn::kernel`) use the exponential; the
//! kernel uses the logarithm, which only pays inside its AVX2 context (see
//! [`ln_positive`]). Both are checked against the library functions across their range
//! in this file's tests.

/// 2⁵² + 2⁵¹: adding it to a number below 2⁵¹ in magnitude rounds that number to an
/// integer held in the low bits of the result.
const ROUNDER: f64 = 6_755_399_441_055_744.0;
/// ln 2 split in two (fdlibm's constants): k·LN2_HI is exact for |k| < 2¹¹.
const LN2_HI: f64 = 0.693_147_180_369_123_8;
const LN2_LO: f64 = 1.908_214_929_270_587_7e-10;
/// Below this e^x is under 2⁻¹⁰²² (no longer a normal number) and is returned as 0.
const EXP_FLOOR: f64 = -708.0;

/// e^x for x ≤ 0 (what softmax needs once the largest logit is subtracted), within 2 ulp
/// of the correctly rounded value; 0 below −708 (where e^x < 3.3e-308). Written without
/// calls or branches so that a loop over a row vectorises: the training loop takes ten
/// exponentials a row, and the library call took about a quarter of its time (perf).
///
/// x = k·ln 2 + r with k an integer and |r| ≤ ln 2 / 2 (Cody and Waite's reduction with a
/// two-part ln 2); e^r by its Taylor series to r¹³/13! (the first term left out is below
/// 2⁻⁵² of the sum); 2^k put into the exponent bits.
#[inline]
pub fn exp_nonpositive(x: f64) -> f64 {
    exp_nonpositive_by(x, |a, b, c| a * b + c)
}

/// [`exp_nonpositive`] with the Taylor series evaluated by fused multiply-adds, for code
/// that runs where the processor has them (the fitting kernel, inside `pulp`'s AVX2/FMA
/// context): half the instructions of a multiply and an add, and no intermediate
/// rounding. Elsewhere `f64::mul_add` is a software routine, correct but slow, so the
/// general softmax keeps [`exp_nonpositive`].
#[inline]
pub fn exp_nonpositive_fma(x: f64) -> f64 {
    exp_nonpositive_by(x, f64::mul_add)
}

/// The shared body: `step(a, b, c)` = a·b + c.
#[inline(always)]
fn exp_nonpositive_by(x: f64, step: impl Fn(f64, f64, f64) -> f64) -> f64 {
    // A comparison, not f64::max, so that NaN stays NaN.
    let clamped = if x < EXP_FLOOR { EXP_FLOOR } else { x };
    let shifted = clamped * std::f64::consts::LOG2_E + ROUNDER;
    let k = shifted - ROUNDER;
    let r = (clamped - k * LN2_HI) - k * LN2_LO;
    let mut poly = INVERSE_FACTORIALS[13];
    for &c in INVERSE_FACTORIALS[..13].iter().rev() {
        poly = step(poly, r, c);
    }
    // k lies in [−1022, 0]: its two's complement sits in the low bits of `shifted`.
    let k_bits = shifted.to_bits().wrapping_sub(ROUNDER.to_bits());
    let scale = f64::from_bits(k_bits.wrapping_add(1023) << 52);
    if x < EXP_FLOOR {
        0.0
    } else {
        poly * scale
    }
}

/// 1/n! for n = 0..=13 (each the nearest f64), the Taylor coefficients of e^r.
const INVERSE_FACTORIALS: [f64; 14] = [
    1.0,
    1.0,
    0.5,
    0.16666666666666666,
    0.041666666666666664,
    0.008333333333333333,
    0.001388888888888889,
    0.0001984126984126984,
    2.48015873015873e-05,
    2.7557319223985893e-06,
    2.755731922398589e-07,
    2.505210838544172e-08,
    2.08767569878681e-09,
    1.6059043836821613e-10,
];

/// Bit pattern of √2/2: mantissas are reduced into [√2/2, √2), where |f/(2+f)| ≤ 0.1716.
const SQRT_HALF_BITS: u64 = 0x3fe6_a09e_667f_3bcd;
/// Bit pattern of 1.0.
const ONE_BITS: u64 = 0x3ff0_0000_0000_0000;
/// The 52 mantissa bits.
const MANTISSA_BITS: u64 = 0x000f_ffff_ffff_ffff;
/// 2⁵⁴: subnormal inputs are scaled by it into the normal range.
const TWO_54: f64 = 18_014_398_509_481_984.0;

/// ln x for every f64 (−∞ at 0, NaN below 0 or at NaN, +∞ at +∞), within 1 ulp of the
/// correctly rounded value (measured in the tests against the library's ln). Written
/// without calls or branches so that a loop over many values vectorises. At the default
/// (SSE2, two lanes, no FMA) target it measured slower than the library's ln, 4.7
/// against 3.6 ns a value (`cargo bench --bench train`, both in one run), so the
/// row-at-a-time losses keep the library's. Inside the fitting kernel's AVX2 context it
/// is the faster one: the guarded backward evaluation took 11.3–11.4 ms with it against
/// 11.5–11.7 ms with the library's (three alternating runs of each build, 200,000 × 32 ×
/// 10); cross-entropy and forward, one logarithm a row, did not differ.
///
/// x = 2^k·m with m in [√2/2, √2) (the reduction of fdlibm's and musl's log, on the
/// bits, with the exponent read as a float through [`ROUNDER`] because SSE2 has no
/// 64-bit integer-to-float conversion); f = m − 1 is exact; s = f/(2+f) and
/// ln(1+f) = 2·atanh s = 2s + Σₙ 2s^(2n+1)/(2n+1), n = 1..10 (the first term left out is
/// below 2⁻⁵⁶ of the sum as |s| ≤ 0.1716), summed as fdlibm does,
/// f − (f²/2 − s·(f²/2 + R)), so that f, the large part, is never rounded.
#[inline]
pub fn ln_positive(x: f64) -> f64 {
    let tiny = x < f64::MIN_POSITIVE;
    let scaled = if tiny { x * TWO_54 } else { x };
    let bits = scaled.to_bits().wrapping_add(ONE_BITS - SQRT_HALF_BITS);
    let biased = (bits >> 52) & 0x7ff;
    let m = f64::from_bits((bits & MANTISSA_BITS).wrapping_add(SQRT_HALF_BITS));
    let offset = if tiny { 1023.0 + 54.0 } else { 1023.0 };
    let k = (f64::from_bits(ROUNDER.to_bits() + biased) - ROUNDER) - offset;
    let f = m - 1.0;
    let s = f / (2.0 + f);
    let z = s * s;
    let mut poly = ATANH_COEFFICIENTS[9];
    for c in ATANH_COEFFICIENTS[..9].iter().rev() {
        poly = poly * z + c;
    }
    let tail = z * poly;
    let half_square = 0.5 * f * f;
    let value = k * LN2_HI - ((half_square - (s * (half_square + tail) + k * LN2_LO)) - f);
    let special = if x == 0.0 {
        f64::NEG_INFINITY
    } else if x == f64::INFINITY {
        f64::INFINITY
    } else {
        f64::NAN
    };
    if x > 0.0 && x < f64::INFINITY {
        value
    } else {
        special
    }
}

/// 2/(2n+1) for n = 1..=10 (each the nearest f64): ln(1+f) = 2s + s·Σ 2/(2n+1)·s²ⁿ.
const ATANH_COEFFICIENTS: [f64; 10] = [
    2.0 / 3.0,
    2.0 / 5.0,
    2.0 / 7.0,
    2.0 / 9.0,
    2.0 / 11.0,
    2.0 / 13.0,
    2.0 / 15.0,
    2.0 / 17.0,
    2.0 / 19.0,
    2.0 / 21.0,
];

#[cfg(test)]
mod tests {
    use super::*;

    /// A seeded stream of uniform numbers in [0, 1) (a 64-bit LCG, Knuth's constants).
    fn uniforms(seed: u64) -> impl Iterator<Item = f64> {
        let mut state = seed;
        std::iter::repeat_with(move || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 11) as f64 / (1u64 << 53) as f64
        })
    }

    /// |ours − reference| in units of the reference's last place.
    fn ulps(ours: f64, reference: f64) -> f64 {
        if ours == reference {
            return 0.0;
        }
        let ulp = f64::from_bits(reference.abs().to_bits() + 1) - reference.abs();
        (ours - reference).abs() / ulp
    }

    #[test]
    fn exp_nonpositive_is_within_two_ulp_of_the_library_exp() {
        // The library's exp (correctly rounded or within 1 ulp, as the platform's libm)
        // is the reference, over [−708, 0] densely, with the edges and a few special
        // values; for both ways of evaluating the series.
        type Exp = fn(f64) -> f64;
        let both: [(&str, Exp); 2] = [
            ("exp_nonpositive", exp_nonpositive),
            ("exp_nonpositive_fma", exp_nonpositive_fma),
        ];
        for (name, exp) in both {
            let mut worst = 0.0f64;
            for (i, u) in uniforms(3).take(400_000).enumerate() {
                let x = match i % 4 {
                    0 => -708.0 * u,
                    1 => -u,
                    2 => -40.0 * u,
                    _ => -1e-9 * u,
                };
                worst = worst.max(ulps(exp(x), x.exp()));
            }
            assert!(worst <= 2.0, "{name}: worst error {worst} ulp");
            assert_eq!(exp(0.0), 1.0, "{name}");
            assert_eq!(exp(-0.0), 1.0, "{name}");
            assert_eq!(exp(-709.0), 0.0, "{name}");
            assert_eq!(exp(f64::NEG_INFINITY), 0.0, "{name}");
            assert!(exp(f64::NAN).is_nan(), "{name}");
            assert!((exp(-708.0) - (-708.0f64).exp()).abs() < 1e-320, "{name}");
        }
    }

    #[test]
    fn ln_positive_is_within_one_ulp_of_the_library_ln() {
        // The library's ln (the platform's libm, correctly rounded or within 1 ulp) is
        // the reference: over the whole normal range by exponent, densely near 1 (where
        // ln x is small and a relative error shows most), over (0, 2] and subnormals.
        let mut worst = 0.0f64;
        for (i, u) in uniforms(7).take(800_000).enumerate() {
            let x = match i % 5 {
                0 => (u * 1400.0 - 700.0).exp(),
                1 => 1.0 + (u - 0.5) * 1e-3,
                2 => 0.5 + 1.5 * u,
                3 => f64::MIN_POSITIVE * u,
                _ => f64::from_bits(((u * 2046.0) as u64 + 1) << 52 | (i as u64 & MANTISSA_BITS)),
            };
            if x > 0.0 {
                worst = worst.max(ulps(ln_positive(x), x.ln()));
            }
        }
        assert!(worst <= 1.0, "worst error {worst} ulp");
        assert_eq!(ln_positive(1.0), 0.0);
        assert_eq!(ln_positive(f64::MAX), f64::MAX.ln());
        assert_eq!(ln_positive(f64::MIN_POSITIVE), f64::MIN_POSITIVE.ln());
        assert_eq!(ln_positive(f64::from_bits(1)), f64::from_bits(1).ln());
        assert_eq!(ln_positive(0.0), f64::NEG_INFINITY);
        assert_eq!(ln_positive(-0.0), f64::NEG_INFINITY);
        assert_eq!(ln_positive(f64::INFINITY), f64::INFINITY);
        assert!(ln_positive(-1.0).is_nan());
        assert!(ln_positive(f64::NEG_INFINITY).is_nan());
        assert!(ln_positive(f64::NAN).is_nan());
    }
}
