//! Seeded stratified k-fold assignment.

use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// Assigns each row a fold in `0..folds` so that every class is spread over the folds
/// as evenly as possible (sizes differ by at most one per class). Rows of each class are
/// shuffled with a ChaCha8 generator seeded by `seed` (portable across platforms and
/// versions), and each class starts where the previous one ended, so fold sizes also
/// stay within one row of each other overall.
pub fn stratified_folds(labels: &[usize], classes: usize, folds: usize, seed: u64) -> Vec<usize> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut by_class: Vec<Vec<usize>> = vec![Vec::new(); classes];
    for (row, &label) in labels.iter().enumerate() {
        by_class[label].push(row);
    }
    let mut fold_of = vec![0; labels.len()];
    let mut next = 0;
    for rows in &mut by_class {
        rows.shuffle(&mut rng);
        for &row in rows.iter() {
            fold_of[row] = next;
            next = (next + 1) % folds.max(1);
        }
    }
    fold_of
}

/// A stratified holdout split: from every class, round(fraction × its rows) rows
/// (shuffled with ChaCha8 seeded by `seed`) go to the holdout. Returns (training rows,
/// holdout rows), each in increasing order.
pub fn stratified_holdout(
    labels: &[usize],
    classes: usize,
    fraction: f64,
    seed: u64,
) -> (Vec<usize>, Vec<usize>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut by_class: Vec<Vec<usize>> = vec![Vec::new(); classes];
    for (row, &label) in labels.iter().enumerate() {
        by_class[label].push(row);
    }
    let mut holdout = Vec::new();
    for rows in &mut by_class {
        rows.shuffle(&mut rng);
        let take = (fraction * rows.len() as f64).round() as usize;
        holdout.extend_from_slice(&rows[..take.min(rows.len())]);
    }
    holdout.sort_unstable();
    let mut is_holdout = vec![false; labels.len()];
    holdout.iter().for_each(|&r| is_holdout[r] = true);
    let train = (0..labels.len()).filter(|&r| !is_holdout[r]).collect();
    (train, holdout)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn holdout_is_stratified_disjoint_and_seeded() {
        let labels: Vec<usize> = (0..100).map(|i| usize::from(i >= 70)).collect();
        let (train, holdout) = stratified_holdout(&labels, 2, 0.2, 1);
        assert_eq!(holdout.len(), 14 + 6);
        assert_eq!(holdout.iter().filter(|&&r| labels[r] == 1).count(), 6);
        assert_eq!(train.len() + holdout.len(), 100);
        assert!(train.iter().all(|r| holdout.binary_search(r).is_err()));
        assert_eq!(stratified_holdout(&labels, 2, 0.2, 1), (train, holdout));
    }

    #[test]
    fn balanced_per_class_and_deterministic() {
        let labels: Vec<usize> = (0..103)
            .map(|i| {
                if i < 60 {
                    0
                } else if i < 90 {
                    1
                } else {
                    2
                }
            })
            .collect();
        let folds = stratified_folds(&labels, 3, 5, 7);
        assert_eq!(
            folds,
            stratified_folds(&labels, 3, 5, 7),
            "same seed, same folds"
        );
        assert_ne!(
            folds,
            stratified_folds(&labels, 3, 5, 8),
            "another seed, other folds"
        );
        for class in 0..3 {
            let mut sizes = [0usize; 5];
            for (row, &f) in folds.iter().enumerate() {
                if labels[row] == class {
                    sizes[f] += 1;
                }
            }
            assert!(
                sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= 1,
                "{sizes:?}"
            );
        }
        let mut total = [0usize; 5];
        folds.iter().for_each(|&f| total[f] += 1);
        assert!(
            total.iter().max().unwrap() - total.iter().min().unwrap() <= 1,
            "{total:?}"
        );
    }
}
