//! Do the randomly audited rows agree with the estimated matrix? For the audited rows of
//! each true class, the observed labels should follow that class's row of T; a G-test
//! (likelihood ratio against the audit's own frequencies) says when they do not. Only
//! random audits are tested: reviewed rows were chosen for looking wrong, so their
//! observed labels are not a sample of T's row.

use ndarray::Array2;

/// Fewest audited rows of a class for its test: below it the G statistic's χ²
/// approximation is poor and the test has little power anyway (common practice asks for
/// expected counts of about 5 in most cells).
pub const MIN_AUDITED_ROWS: usize = 20;

/// Family-wise significance level over all classes (Bonferroni: each class is tested at
/// this level divided by the number of classes tested).
pub const ALPHA: f64 = 0.01;

/// Cells of T below this count as "T says this flip does not happen"; an audited row in
/// such a cell is evidence against T that the test weighs at this probability.
const FLOOR: f64 = 1e-4;

/// One true class whose audited rows contradict T.
#[derive(Debug, Clone, PartialEq)]
pub struct Disagreement {
    /// The true class.
    pub class: usize,
    /// Its randomly audited rows.
    pub audited: usize,
    /// The G statistic and its p-value (χ² with one fewer degree of freedom than cells).
    pub g: f64,
    /// The p-value.
    pub p_value: f64,
    /// The flip where audit and matrix differ most: (observed class, audited share,
    /// matrix share).
    pub worst: (usize, f64, f64),
}

/// The true classes whose randomly audited rows (`audited[r]` = true class of row r)
/// disagree with `t` at the [`ALPHA`] level, Bonferroni-corrected over the classes tested.
pub fn audit_disagreements(
    t: &Array2<f64>,
    labels: &[usize],
    audited: &[Option<usize>],
) -> Vec<Disagreement> {
    let k = t.nrows();
    let mut counts = Array2::<f64>::zeros((k, k));
    for (&observed, truth) in labels.iter().zip(audited) {
        if let Some(&i) = truth.as_ref() {
            counts[[i, observed]] += 1.0;
        }
    }
    let tested: Vec<usize> = (0..k)
        .filter(|&i| counts.row(i).sum() >= MIN_AUDITED_ROWS as f64)
        .collect();
    let level = ALPHA / tested.len().max(1) as f64;
    tested
        .into_iter()
        .filter_map(|i| {
            let n = counts.row(i).sum();
            let (mut g, mut cells) = (0.0, 0usize);
            let mut worst: (usize, f64, f64) = (i, 0.0, 0.0);
            for j in 0..k {
                let model = t[[i, j]].max(FLOOR);
                let seen = counts[[i, j]];
                cells += usize::from(t[[i, j]] >= FLOOR || seen > 0.0);
                if seen > 0.0 {
                    g += 2.0 * seen * (seen / (n * model)).ln();
                }
                if j != i && (seen / n - t[[i, j]]).abs() > (worst.1 - worst.2).abs() {
                    worst = (j, seen / n, t[[i, j]]);
                }
            }
            let p_value = chi_square_sf(g.max(0.0), cells.saturating_sub(1).max(1) as f64);
            (p_value < level).then_some(Disagreement {
                class: i,
                audited: n as usize,
                g,
                p_value,
                worst,
            })
        })
        .collect()
}

/// P(χ²_df > x): the regularised upper incomplete gamma function Q(df/2, x/2).
pub fn chi_square_sf(x: f64, df: f64) -> f64 {
    upper_gamma_q(df / 2.0, x / 2.0)
}

/// Q(a, x) by its series below x = a + 1 and its continued fraction above (the usual
/// split; Numerical Recipes §6.2), to about 1e-14.
fn upper_gamma_q(a: f64, x: f64) -> f64 {
    if x <= 0.0 {
        return 1.0;
    }
    let prefix = (a * x.ln() - x - ln_gamma(a)).exp();
    if x < a + 1.0 {
        // P(a, x) = e^{−x} x^a / Γ(a) · Σ x^n / (a (a+1) … (a+n)).
        let (mut term, mut sum, mut ap) = (1.0 / a, 1.0 / a, a);
        for _ in 0..1000 {
            ap += 1.0;
            term *= x / ap;
            sum += term;
            if term.abs() < sum.abs() * 1e-16 {
                break;
            }
        }
        (1.0 - sum * prefix).clamp(0.0, 1.0)
    } else {
        // Lentz's method for the continued fraction of Q.
        let tiny = 1e-300;
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / tiny;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..1000 {
            let an = -(i as f64) * (i as f64 - a);
            b += 2.0;
            d = an * d + b;
            d = if d.abs() < tiny { tiny } else { d };
            c = b + an / c;
            c = if c.abs() < tiny { tiny } else { c };
            d = 1.0 / d;
            let step = d * c;
            h *= step;
            if (step - 1.0).abs() < 1e-16 {
                break;
            }
        }
        (prefix * h).clamp(0.0, 1.0)
    }
}

/// ln Γ(x) for x > 0 (Lanczos, g = 7, nine coefficients: about 15 digits).
fn ln_gamma(x: f64) -> f64 {
    const G: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        // Reflection: Γ(x) Γ(1 − x) = π / sin(πx).
        let pi = std::f64::consts::PI;
        return (pi / (pi * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let mut sum = G[0];
    for (i, &g) in G.iter().enumerate().skip(1) {
        sum += g / (x + i as f64);
    }
    let t = x + 7.5;
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + sum.ln()
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn chi_square_tail_matches_tables_and_closed_forms() {
        // 5 % critical values of χ² (any statistics table): 3.841 (1 df), 5.991 (2),
        // 11.070 (5), 18.307 (10).
        for (x, df) in [
            (3.841_458_820_694_124, 1.0),
            (5.991_464_547_107_979, 2.0),
            (11.070_497_693_516_35, 5.0),
            (18.307_038_053_275_146, 10.0),
        ] {
            assert!((chi_square_sf(x, df) - 0.05).abs() < 1e-9, "{x} {df}");
        }
        // Closed forms: 2 df → e^{−x/2}; 4 df → e^{−x/2}(1 + x/2).
        assert!((chi_square_sf(3.0, 2.0) - (-1.5f64).exp()).abs() < 1e-12);
        assert!((chi_square_sf(2.0, 4.0) - 2.0 * (-1.0f64).exp()).abs() < 1e-12);
        assert!((chi_square_sf(40.0, 4.0) - 21.0 * (-20.0f64).exp()).abs() < 1e-14);
        assert_eq!(chi_square_sf(0.0, 3.0), 1.0);
        // ln Γ(5) = ln 24; Γ(1/2) = √π.
        assert!((ln_gamma(5.0) - 24f64.ln()).abs() < 1e-12);
        assert!((ln_gamma(0.5) - std::f64::consts::PI.sqrt().ln()).abs() < 1e-12);
    }

    #[test]
    fn audits_that_follow_the_matrix_pass_and_a_missing_flip_is_caught() {
        let t = array![[0.8, 0.2], [0.0, 1.0]];
        // 50 audited rows of class 0: 40 observed 0, 10 observed 1 (exactly T's row);
        // 30 of class 1, all observed 1.
        let mut labels = vec![0; 40];
        labels.extend([1; 10]);
        labels.extend([1; 30]);
        let mut audited: Vec<Option<usize>> = vec![Some(0); 50];
        audited.extend([Some(1); 30]);
        assert!(audit_disagreements(&t, &labels, &audited).is_empty());
        // Now 10 of class 1's audited rows are observed as 0, which T says never happens.
        labels[50..60].fill(0);
        let d = audit_disagreements(&t, &labels, &audited);
        assert_eq!(d.len(), 1);
        assert_eq!((d[0].class, d[0].audited), (1, 30));
        assert_eq!(d[0].worst.0, 0);
        assert!(d[0].p_value < 1e-6);
        // Too few audited rows are not tested.
        let few: Vec<Option<usize>> = audited
            .iter()
            .enumerate()
            .map(|(r, &a)| a.filter(|_| !(50..70).contains(&r)))
            .collect();
        let d = audit_disagreements(&t, &labels, &few);
        assert!(d.is_empty(), "{d:?}");
    }
}
