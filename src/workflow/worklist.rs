//! Which rows go on a worklist: the listed suspects and a random control slice.
//!
//! Reviews of listed suspects say how precise the list is, but nothing about the rows it
//! left out, and they are not a random sample of anything. A few rows drawn uniformly
//! from the unlisted rows (the control slice) make every review round measure the error
//! rate the list misses, without a separate audit. Both front ends build worklists here.

use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::io::worklist::{Item, Slice};
use crate::noise::scores::RowScore;
use crate::workflow::ranking::Ranking;

/// Share of a worklist's budget given to control rows by default. A cost, not a
/// measured optimum: at 5 % a budget of 500 buys 25 control rows, enough to tell an
/// unlisted error rate near 12 % from one near zero (90 % Wilson intervals for 3 and 0
/// errors in 25: 4.9–26.5 % and 0–9.8 %), for 5 % fewer suspects reviewed.
pub const DEFAULT_CONTROL_SHARE: f64 = 0.05;

/// True for a control share the worklist can hold: from 0 to below one half (the rows
/// chosen for being suspect stay the majority).
pub fn valid_control_share(share: f64) -> bool {
    (0.0..0.5).contains(&share)
}

/// A budget of `budget` rows split into (suspects, control rows): ⌈share × budget⌉
/// control rows, but always at least one suspect.
pub fn split_budget(budget: usize, share: f64) -> (usize, usize) {
    let control = if share > 0.0 {
        ((budget as f64 * share).ceil() as usize).min(budget.saturating_sub(1))
    } else {
        0
    };
    (budget - control, control)
}

/// The suspects a worklist lists: the first `suspects` of `table` (positions in the
/// ranking that pass the filters, in rank order), each with its 1-based rank among all
/// rows. One function, so that the exported worklist, a review round and every figure
/// of what reviewing them should find read the same rows.
pub fn listed_head(ranking: &Ranking, table: &[u32], suspects: usize) -> Vec<(RowScore, usize)> {
    table
        .iter()
        .take(suspects)
        .map(|&p| (ranking.ranked[p as usize], p as usize + 1))
        .collect()
}

/// `count` rows drawn uniformly without replacement from the rows in `0..rows` that are
/// not `listed` and that `eligible` accepts (fewer when fewer are left), in draw order.
///
/// Each row carries a seeded random key ([`draw_key`] on stream [`CONTROL_STREAM`]) and
/// the draw is the `count` eligible unlisted rows with the smallest keys, smallest first:
/// a uniform draw without replacement that needs nothing but the row number, so a pass
/// over a table too large to hold (`workflow::streamed`) draws exactly the rows this
/// does, keeping only the smallest keys it has seen.
pub fn draw_control(
    rows: usize,
    listed: &[usize],
    count: usize,
    seed: u64,
    eligible: impl Fn(usize) -> bool,
) -> Vec<usize> {
    if count == 0 {
        return Vec::new();
    }
    let mut taken = vec![false; rows];
    listed.iter().for_each(|&r| taken[r] = true);
    let mut keyed: Vec<(u64, usize)> = (0..rows)
        .filter(|&r| !taken[r] && eligible(r))
        .map(|r| (draw_key(seed, CONTROL_STREAM, r), r))
        .collect();
    let count = count.min(keyed.len());
    if count < keyed.len() {
        keyed.select_nth_unstable(count);
    }
    keyed.truncate(count);
    keyed.sort_unstable();
    keyed.into_iter().map(|(_, r)| r).collect()
}

/// The key stream of the control draw.
pub const CONTROL_STREAM: u64 = 1;
/// The key stream of a streamed run's fitting sample.
pub const SAMPLE_STREAM: u64 = 2;

/// A row's random key for a seeded draw: SplitMix64's finaliser (Steele, Lea & Flood,
/// OOPSLA 2014) over the seed, the stream and the row. The rows with the `n` smallest
/// keys are a uniform draw of `n` rows without replacement (the keys behave as
/// independent uniform numbers; measured in the tests below), and any pass can compute
/// a row's key from its number alone.
pub fn draw_key(seed: u64, stream: u64, row: usize) -> u64 {
    let mut z = mix(mix(seed ^ stream.wrapping_mul(0xD1B5_4A32_D192_ED03)) ^ row as u64);
    z ^= z >> 31;
    z
}

/// SplitMix64's increment and finaliser.
fn mix(x: u64) -> u64 {
    let mut z = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// The worklist's items in the order reviewers see them: suspects and control rows
/// shuffled together (ChaCha8 seeded with `seed`, stream 1), so position tells nothing.
/// `listed` and `control` pair each row's verdict with its 1-based rank among all rows.
pub fn blind_items(
    listed: &[(RowScore, usize)],
    control: &[(RowScore, usize)],
    seed: u64,
) -> Vec<Item> {
    let item = |slice: Slice| move |&(score, rank): &(RowScore, usize)| Item { score, rank, slice };
    let mut items: Vec<Item> = listed
        .iter()
        .map(item(Slice::Listed))
        .chain(control.iter().map(item(Slice::Control)))
        .collect();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(1);
    items.shuffle(&mut rng);
    items
}

/// A blind worklist: the `listed` suspects (each with its rank) and `count` control rows
/// drawn from the other rows that `eligible` accepts, shuffled together (both draws
/// seeded with `seed`); without control rows, the listed rows in their order. `verdicts` scores given rows and `ranks` gives their 1-based
/// ranks, as the caller has them at hand.
pub fn with_control(
    listed: &[(RowScore, usize)],
    rows: usize,
    count: usize,
    seed: u64,
    eligible: impl Fn(usize) -> bool,
    verdicts: impl FnOnce(&[usize]) -> Vec<RowScore>,
    ranks: impl FnOnce(&[usize]) -> Vec<usize>,
) -> Vec<Item> {
    if count == 0 {
        let item = |&(score, rank): &(RowScore, usize)| Item {
            score,
            rank,
            slice: Slice::Listed,
        };
        return listed.iter().map(item).collect();
    }
    let listed_rows: Vec<usize> = listed.iter().map(|(s, _)| s.row).collect();
    let control = draw_control(rows, &listed_rows, count, seed, eligible);
    let scored: Vec<(RowScore, usize)> = verdicts(&control)
        .into_iter()
        .zip(ranks(&control))
        .collect();
    blind_items(listed, &scored, seed)
}

/// The 1-based rank of each of `rows` in `order` (every row, most suspect first).
pub fn ranks_of(order: impl Iterator<Item = usize>, rows: &[usize]) -> Vec<usize> {
    let wanted: rustc_hash::FxHashMap<usize, usize> =
        rows.iter().enumerate().map(|(i, &r)| (r, i)).collect();
    let mut ranks = vec![0; rows.len()];
    for (position, row) in order.enumerate() {
        if let Some(&i) = wanted.get(&row) {
            ranks[i] = position + 1;
        }
    }
    ranks
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_budget_keeps_at_least_one_suspect() {
        assert_eq!(split_budget(100, 0.05), (95, 5));
        assert_eq!(split_budget(10, 0.05), (9, 1), "rounded up");
        assert_eq!(split_budget(1, 0.05), (1, 0));
        assert_eq!(split_budget(100, 0.0), (100, 0));
        assert_eq!(split_budget(0, 0.05), (0, 0));
    }

    #[test]
    fn control_rows_are_a_uniform_seeded_draw_from_the_unlisted_rows() {
        let listed = [0, 1, 2, 3, 4];
        let a = draw_control(20, &listed, 6, 7, |_| true);
        assert_eq!(a, draw_control(20, &listed, 6, 7, |_| true), "same seed");
        assert_ne!(a, draw_control(20, &listed, 6, 8, |_| true), "another seed");
        assert_eq!(a.len(), 6);
        assert!(a.iter().all(|r| !listed.contains(r) && *r < 20));
        let mut unique = a.clone();
        unique.sort_unstable();
        unique.dedup();
        assert_eq!(unique.len(), 6, "without replacement");
        let even = draw_control(20, &listed, 100, 7, |r| r % 2 == 0);
        assert_eq!(even.len(), 7, "all that is left: 6, 8, …, 18");
        // Uniform: over 20,000 seeds each of 15 unlisted rows is drawn about 20,000 × 3 /
        // 15 = 4,000 times (binomial sd ≈ 57; allow 5 sd).
        let mut hits = [0usize; 20];
        for seed in 0..20_000 {
            draw_control(20, &listed, 3, seed, |_| true)
                .iter()
                .for_each(|&r| hits[r] += 1);
        }
        assert!(hits[..5].iter().all(|&h| h == 0));
        for (r, &h) in hits.iter().enumerate().skip(5) {
            assert!((3_715..=4_285).contains(&h), "row {r}: {h}");
        }
    }

    #[test]
    fn blind_items_mix_both_slices_and_repeat_with_the_seed() {
        let scored = |rows: std::ops::Range<usize>| -> Vec<(RowScore, usize)> {
            rows.map(|row| {
                (
                    RowScore {
                        row,
                        ..Default::default()
                    },
                    row + 1,
                )
            })
            .collect()
        };
        let (listed, control) = (scored(0..40), scored(100..104));
        let items = blind_items(&listed, &control, 3);
        assert_eq!(items, blind_items(&listed, &control, 3));
        assert_eq!(items.len(), 44);
        let control_positions: Vec<usize> = items
            .iter()
            .enumerate()
            .filter(|(_, i)| i.slice == Slice::Control)
            .map(|(p, _)| p)
            .collect();
        assert_eq!(control_positions.len(), 4);
        assert_ne!(control_positions, vec![40, 41, 42, 43], "not appended");
        assert!(items.iter().all(|i| i.rank == i.score.row + 1));
    }

    #[test]
    fn ranks_are_positions_in_the_order() {
        assert_eq!(ranks_of([5, 3, 9, 0].into_iter(), &[9, 5]), vec![3, 1]);
    }
}
