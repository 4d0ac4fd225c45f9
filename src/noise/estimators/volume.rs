//! λ, the joint fit's volume weight, chosen from the randomly audited rows when there are
//! enough of them.
//!
//! The likelihood of the observed labels is nearly flat along the direction λ moves T
//! (that is why a penalty is needed at all), so it cannot choose λ. A random audit can:
//! its observed label given its audited class, ln T[y*][observed], scores a matrix
//! directly. Each candidate λ is fitted with the random audits' trusted labels held out
//! (their observed labels stay in the likelihood), the held-out rows are scored, and the
//! default is kept unless another λ scores clearly better (by [`MIN_GAIN_NATS`] a row
//! and [`MIN_GAIN_Z`] standard errors of the paired difference).
//!
//! Measured (DEVELOPERS.md, "Choosing λ"): on the validity report's seven synthetic cases
//! and on 20 more tables (make_data.py: 4 designs × seeds 501–505, 3–5 % random
//! audits), each with flipmend's own out-of-fold probabilities and with the sharper
//! probabilities of a stronger model (a clean classifier fitted on fresh true-labelled
//! rows, pushed through the generating matrix). With its own probabilities every λ on
//! the grid scored within 0.003 nats a row, and the rule kept the default on all 27
//! tables (results unchanged). With the stronger model's it moved λ on 10 of 27: better
//! on 9 (the 4-class asymmetric design from a mean 6.3 to 3.2 × the oracle's error;
//! gauss4_asym 7.7 → 1.7 ×, gauss8_sym40 2.6 → 1.4 ×), worse on one (2.3 → 3.4 ×). A
//! z-test alone was not enough: the paired differences of a smoothly moving T are nearly
//! constant, so gains of 0.001 nats came out "significant" (z up to 2.7) and would have
//! moved λ to values 2–4 × worse on sources5_pair20.
//!
//! With flipmend's own out-of-fold probabilities the candidates are therefore not
//! fitted at all: on 18 more tables (make_data.py, 6 designs × seeds 601–603, 4 %
//! random audits: 2 to 8 classes, symmetric and pair flips, two blobs a class, three
//! label sources) the best candidate gained at most 0.0018 nats a row, against the
//! 0.01 needed, so 45 tables out of 45 kept the default. The candidates were 99 of the
//! 132 objective evaluations of the matrix on vs_peer.sh's 160,000 training rows.
//!
//! Only random audits are used: reviewed suspects were chosen because they looked wrong,
//! so their observed labels are not a sample of T's rows.

use ndarray::Array2;

use super::Sample;
use crate::error::Result;
use crate::noise::joint::{fit_joint_from, JointFit, JointParams, Start, DEFAULT_VOLUME_SCALE};

/// The candidates, as multiples of 1/K (the default, [`DEFAULT_VOLUME_SCALE`], among them).
pub const VOLUME_GRID: [f64; 6] = [0.0025, 0.005, 0.01, 0.02, 0.04, 0.08];
/// Fewer random audits than this keep the default: the standard error of a mean over
/// fewer rows is itself too uncertain (the usual n ≥ 30 rule of thumb, from memory).
pub const MIN_CHOICE_AUDITS: usize = 30;
/// A candidate must beat the default's held-out log-likelihood by this much a row.
pub const MIN_GAIN_NATS: f64 = 0.01;
/// … and by this many standard errors of the paired difference.
pub const MIN_GAIN_Z: f64 = 2.0;

/// The volume weight a joint fit used, and why.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct VolumeChoice {
    /// λ.
    pub weight: f64,
    /// Why this λ.
    pub chosen_by: ChosenBy,
}

/// Why a joint fit used its λ.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ChosenBy {
    /// The user gave it.
    Given,
    /// The default; `audits` random audits were available (fewer than
    /// [`MIN_CHOICE_AUDITS`], or none of the grid scored clearly better on them).
    Default {
        /// Randomly audited rows.
        audits: usize,
    },
    /// The default, not put to the random audits (`audits` of them) because the
    /// probabilities are flipmend's own out-of-fold ones, with which the audits never
    /// preferred another value (see [`choose_volume_weight`]).
    OwnProbabilities {
        /// Randomly audited rows.
        audits: usize,
    },
    /// The random audits' held-out likelihood preferred it.
    Audits {
        /// Randomly audited rows.
        audits: usize,
        /// Its held-out log-likelihood gain over the default, nats a row.
        gain_nats: f64,
    },
}

impl ChosenBy {
    /// How JSON reports name the reason.
    pub fn name(&self) -> &'static str {
        match self {
            ChosenBy::Given => "given",
            ChosenBy::Default { .. } | ChosenBy::OwnProbabilities { .. } => "default",
            ChosenBy::Audits { .. } => "random audits",
        }
    }
}

impl VolumeChoice {
    /// One line for reports: λ and why.
    pub fn describe(&self, classes: usize) -> String {
        let weight = significant(self.weight);
        let scale = significant(self.weight * classes as f64);
        match self.chosen_by {
            ChosenBy::Given => format!("volume weight λ = {weight} (given)"),
            ChosenBy::Default { audits: 0 } => format!(
                "volume weight λ = {weight} ({scale}/K, the default; no random audits to choose \
                 it from)"
            ),
            ChosenBy::Default { audits } if audits < MIN_CHOICE_AUDITS => format!(
                "volume weight λ = {weight} ({scale}/K, the default; {audits} random audits, \
                 {MIN_CHOICE_AUDITS} are needed to choose it from the data)"
            ),
            ChosenBy::Default { audits } => format!(
                "volume weight λ = {weight} ({scale}/K, the default: no other value scored \
                 clearly better on the {audits} random audits held out)"
            ),
            ChosenBy::OwnProbabilities { audits } => format!(
                "volume weight λ = {weight} ({scale}/K, the default; not chosen from the \
                 {audits} random audits: with flipmend's own out-of-fold probabilities no \
                 other value has scored clearly better on them)"
            ),
            ChosenBy::Audits { audits, gain_nats } => format!(
                "volume weight λ = {weight} ({scale}/K, chosen on the {audits} random audits \
                 held out: {gain_nats:.3} nats a row more likely than the default)"
            ),
        }
    }
}

/// `x` to six decimals without trailing zeros (0.00125, 0.01).
fn significant(x: f64) -> String {
    let text = format!("{x:.6}");
    text.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// λ for a joint fit started from `start`, and the parameters the final fit (with the
/// audits) should start from when λ moved: the default unless the random audits held out clearly prefer another
/// value of [`VOLUME_GRID`].
///
/// The candidates are fitted as two warm-started chains walking away from the default
/// (down and up the grid), each fit starting from its neighbour's parameters, and the
/// final fit starts from the chosen candidate's when that is not the default. Measured on
/// gauss10_pair30 (40,000 rows, K = 10, given probabilities, 2 cores): the whole estimate
/// took 0.95 s with λ given, 6.3 s with six cold-started candidates, 1.8 s with the chains.
pub(super) fn choose_volume_weight(
    sample: &Sample,
    start: &Array2<f64>,
    params: &JointParams,
) -> Result<(VolumeChoice, Option<Vec<f64>>)> {
    let k = sample.probs.ncols().max(1) as f64;
    let default = VolumeChoice {
        weight: DEFAULT_VOLUME_SCALE / k,
        chosen_by: ChosenBy::Default { audits: 0 },
    };
    let Some(trusted) = sample.trusted else {
        return Ok((default, None));
    };
    let audits = AuditCounts::of(sample, trusted);
    // Too few random audits to choose from, or probabilities with which they never chose.
    let kept = match (audits.rows < MIN_CHOICE_AUDITS, sample.own_probabilities) {
        (true, _) => Some(ChosenBy::Default {
            audits: audits.rows,
        }),
        (false, true) => Some(ChosenBy::OwnProbabilities {
            audits: audits.rows,
        }),
        (false, false) => None,
    };
    if let Some(chosen_by) = kept {
        return Ok((
            VolumeChoice {
                chosen_by,
                ..default
            },
            None,
        ));
    }
    let held_out: Vec<Option<usize>> = (0..trusted.len())
        .map(|r| trusted[r].filter(|_| !sample.at_random(r)))
        .collect();
    let blind = Sample {
        trusted: Some(&held_out),
        probs: sample.probs.reborrow(),
        ..*sample
    };
    let fit = |scale: f64, from: Start| {
        let p = JointParams {
            volume_weight: scale / k,
            ..params.clone()
        };
        fit_joint_from(&blind, from, &p, &mut |_| true)
    };
    let at_default = VOLUME_GRID
        .iter()
        .position(|&s| s == DEFAULT_VOLUME_SCALE)
        .expect("the default is on the grid");
    let centre = fit(VOLUME_GRID[at_default], Start::Matrix(start))?;
    let chain = |scales: &mut dyn Iterator<Item = &f64>| -> Result<Vec<JointFit>> {
        let mut fits: Vec<JointFit> = Vec::new();
        for &scale in scales {
            let from = fits.last().unwrap_or(&centre).parameters.as_slice();
            fits.push(fit(scale, Start::Parameters(from))?);
        }
        Ok(fits)
    };
    let (down, up) = rayon::join(
        || chain(&mut VOLUME_GRID[..at_default].iter().rev()),
        || chain(&mut VOLUME_GRID[at_default + 1..].iter()),
    );
    let mut fits: Vec<JointFit> = down?.into_iter().rev().collect();
    fits.push(centre);
    fits.extend(up?);
    let matrices: Vec<&Array2<f64>> = fits.iter().map(|f| &f.matrix).collect();
    let choice = audits.pick(&matrices, at_default, k);
    // Keeping the default, the final fit starts where it always did (from `start`), so
    // its result is the fit without a choice, bit for bit.
    let warm = match choice.chosen_by {
        ChosenBy::Audits { .. } => VOLUME_GRID
            .iter()
            .position(|&s| s / k == choice.weight)
            .map(|chosen| fits.swap_remove(chosen).parameters),
        _ => None,
    };
    Ok((choice, warm))
}

/// How often each (audited class, observed label) pair occurs among the random audits:
/// all a held-out ln T[y*][observed] score needs.
struct AuditCounts {
    pairs: Array2<f64>,
    rows: usize,
}

impl AuditCounts {
    fn of(sample: &Sample, trusted: &[Option<usize>]) -> AuditCounts {
        let k = sample.probs.ncols();
        let mut pairs = Array2::zeros((k, k));
        let mut rows = 0;
        for &r in sample.rows {
            if let Some(t) = trusted[r].filter(|_| sample.at_random(r)) {
                pairs[[t, sample.labels[r]]] += 1.0;
                rows += 1;
            }
        }
        AuditCounts { pairs, rows }
    }

    /// The mean and standard error of ln a[y*][obs] − ln b[y*][obs] over the audits.
    fn paired_gain(&self, a: &Array2<f64>, b: &Array2<f64>) -> (f64, f64) {
        let n = self.rows as f64;
        let (mut sum, mut square) = (0.0, 0.0);
        for ((&count, &x), &y) in self.pairs.iter().zip(a.iter()).zip(b.iter()) {
            let d = x.max(f64::MIN_POSITIVE).ln() - y.max(f64::MIN_POSITIVE).ln();
            sum += count * d;
            square += count * d * d;
        }
        let mean = sum / n;
        let variance = ((square - n * mean * mean) / (n - 1.0)).max(0.0);
        (mean, (variance / n).sqrt())
    }

    /// The best-scoring matrix's λ if it beats the default's clearly, else the default.
    fn pick(&self, matrices: &[&Array2<f64>], at_default: usize, k: f64) -> VolumeChoice {
        let gains: Vec<(f64, f64)> = matrices
            .iter()
            .map(|m| self.paired_gain(m, matrices[at_default]))
            .collect();
        let best = (0..matrices.len())
            .max_by(|&a, &b| gains[a].0.total_cmp(&gains[b].0))
            .unwrap_or(at_default);
        let (gain, se) = gains[best];
        let clear = gain >= MIN_GAIN_NATS && gain >= MIN_GAIN_Z * se;
        let audits = self.rows;
        if best != at_default && clear {
            VolumeChoice {
                weight: VOLUME_GRID[best] / k,
                chosen_by: ChosenBy::Audits {
                    audits,
                    gain_nats: gain,
                },
            }
        } else {
            VolumeChoice {
                weight: VOLUME_GRID[at_default] / k,
                chosen_by: ChosenBy::Default { audits },
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::origin::Origin;
    use ndarray::array;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// Rows whose noisy probabilities are exactly Tᵀ q(x) for a sharp clean posterior q:
    /// the probabilities of a model far stronger than flipmend's own, where the default λ
    /// leaves T near its counting start (the README's known limit). Every label is drawn
    /// from the model itself, so the generating T is the truth. Returns (probs, labels,
    /// true classes).
    fn sharp_rows(t: &Array2<f64>, n: usize, seed: u64) -> (Array2<f32>, Vec<usize>, Vec<usize>) {
        let k = t.nrows();
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut probs = Array2::<f32>::zeros((n, k));
        let (mut labels, mut truth) = (Vec::new(), Vec::new());
        for r in 0..n {
            let centre = rng.random_range(0..k);
            let mut q: Vec<f64> = (0..k)
                .map(|c| if c == centre { 3.0 } else { 0.0 } + rng.random::<f64>() * 2.0)
                .collect();
            crate::learn::loss::softmax(&mut q);
            let y = draw(&q, rng.random());
            let observed: Vec<f64> = t.row(y).to_vec();
            truth.push(y);
            labels.push(draw(&observed, rng.random()));
            for j in 0..k {
                probs[[r, j]] = (0..k).map(|i| q[i] * t[[i, j]]).sum::<f64>() as f32;
            }
        }
        (probs, labels, truth)
    }

    fn draw(p: &[f64], u: f64) -> usize {
        let mut acc = 0.0;
        p.iter()
            .position(|&v| {
                acc += v;
                u < acc
            })
            .unwrap_or(p.len() - 1)
    }

    fn error(a: &Array2<f64>, b: &Array2<f64>) -> f64 {
        (a - b).mapv(f64::abs).mean().unwrap()
    }

    #[test]
    fn paired_gain_by_hand() {
        // Two audits: (true 0, observed 0) and (true 1, observed 0).
        let mut pairs = Array2::zeros((2, 2));
        pairs[[0, 0]] = 1.0;
        pairs[[1, 0]] = 1.0;
        let counts = AuditCounts { pairs, rows: 2 };
        let a = array![[0.9, 0.1], [0.2, 0.8]];
        let b = array![[0.8, 0.2], [0.1, 0.9]];
        let d = [(0.9f64 / 0.8).ln(), (0.2f64 / 0.1).ln()];
        let mean = (d[0] + d[1]) / 2.0;
        let sd = ((d[0] - mean).powi(2) + (d[1] - mean).powi(2)).sqrt(); // n − 1 = 1
        let (gain, se) = counts.paired_gain(&a, &b);
        assert!((gain - mean).abs() < 1e-12);
        assert!((se - sd / 2f64.sqrt()).abs() < 1e-12);
    }

    #[test]
    fn a_tiny_gain_keeps_the_default_however_significant() {
        // Every candidate slightly better than the default by the same margin on every
        // audit: z is infinite, the gain below MIN_GAIN_NATS.
        let mut pairs = Array2::zeros((2, 2));
        pairs[[0, 0]] = 50.0;
        let counts = AuditCounts { pairs, rows: 50 };
        let matrices: Vec<Array2<f64>> = VOLUME_GRID
            .iter()
            .map(|&s| {
                let d = 0.9 + s * 0.05;
                array![[d, 1.0 - d], [0.2, 0.8]]
            })
            .collect();
        let refs: Vec<&Array2<f64>> = matrices.iter().collect();
        let choice = counts.pick(&refs, 2, 2.0);
        assert_eq!(choice.chosen_by, ChosenBy::Default { audits: 50 });
        assert_eq!(choice.weight, DEFAULT_VOLUME_SCALE / 2.0);
    }

    #[test]
    fn audits_choose_a_volume_weight_closer_to_the_truth() {
        // A simulation with a known matrix (this test's own generator, `sharp_rows`).
        let t = array![
            [0.80, 0.15, 0.05, 0.00],
            [0.05, 0.90, 0.05, 0.00],
            [0.00, 0.00, 0.70, 0.30],
            [0.00, 0.10, 0.00, 0.90]
        ];
        let (probs, labels, truth) = sharp_rows(&t, 8000, 11);
        let trusted: Vec<Option<usize>> = (0..8000)
            .map(|r| (r % 25 == 0).then_some(truth[r]))
            .collect();
        let rows: Vec<usize> = (0..8000).collect();
        let classes: Vec<String> = (0..4).map(|c| format!("c{c}")).collect();
        let sample = Sample {
            probs: probs.view(),
            labels: &labels,
            trusted: Some(&trusted),
            origins: None,
            rows: &rows,
            own_probabilities: false,
        };
        let fit = |volume_weight| {
            super::super::estimate(
                &crate::noise::Method::Joint { volume_weight },
                &sample,
                &classes,
            )
            .unwrap()
        };
        let chosen = fit(None);
        let default = fit(Some(DEFAULT_VOLUME_SCALE / 4.0));
        let volume = chosen.volume.unwrap();
        assert!(
            matches!(volume.chosen_by, ChosenBy::Audits { audits: 320, .. }),
            "{volume:?}"
        );
        let (e_chosen, e_default) = (error(&chosen.matrix, &t), error(&default.matrix, &t));
        // Measured: 0.0083 against 0.0108 (the matrix counted from the true classes: 0.0019).
        assert!(e_chosen < 0.85 * e_default, "{e_chosen} vs {e_default}");
        // Marked as flipmend's own out-of-fold probabilities, the same rows keep the
        // default without a choice: the fit with λ given, bit for bit.
        let own = Sample {
            own_probabilities: true,
            ..sample
        };
        let kept = super::super::estimate(
            &crate::noise::Method::Joint {
                volume_weight: None,
            },
            &own,
            &classes,
        )
        .unwrap();
        assert_eq!(
            kept.volume.unwrap().chosen_by,
            ChosenBy::OwnProbabilities { audits: 320 }
        );
        assert_eq!(kept.matrix, default.matrix);
    }

    #[test]
    fn reviewed_suspects_and_too_few_audits_keep_the_default() {
        let t = array![[0.8, 0.2], [0.1, 0.9]];
        let (probs, labels, truth) = sharp_rows(&t, 600, 5);
        let trusted: Vec<Option<usize>> = truth.iter().map(|&y| Some(y)).collect();
        let rows: Vec<usize> = (0..600).collect();
        // Every row reviewed as a listed suspect: none is a random audit.
        let origins = vec![Origin::Review; 600];
        let mut sample = Sample {
            probs: probs.view(),
            labels: &labels,
            trusted: Some(&trusted),
            origins: Some(&origins),
            rows: &rows,
            own_probabilities: false,
        };
        let start = array![[0.9, 0.1], [0.1, 0.9]];
        let params = JointParams::default();
        let (choice, warm) = choose_volume_weight(&sample, &start, &params).unwrap();
        assert_eq!(choice.chosen_by, ChosenBy::Default { audits: 0 });
        assert!(warm.is_none());
        // 29 random audits: one short of MIN_CHOICE_AUDITS.
        let few: Vec<usize> = (0..MIN_CHOICE_AUDITS - 1).collect();
        let mut origins = vec![Origin::Review; 600];
        few.iter().for_each(|&r| origins[r] = Origin::Audit);
        sample.origins = Some(&origins);
        let (choice, _) = choose_volume_weight(&sample, &start, &params).unwrap();
        assert_eq!(
            choice.chosen_by,
            ChosenBy::Default {
                audits: MIN_CHOICE_AUDITS - 1
            }
        );
    }
}
