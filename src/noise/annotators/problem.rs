//! The labels compiled into per-item lists, and the checks that refuse what EM cannot
//! identify (silent annotators, annotators that never share an item, bad priors).

use super::em::normalise_rows;
use super::*;

pub(super) fn compile(labels: &AnnotatorLabels) -> Result<Problem> {
    let (classes, (items, annotators)) = (labels.classes, labels.labels.dim());
    if classes < 2 {
        return usage(format!("consensus needs at least 2 classes, not {classes}"));
    }
    if items == 0 || annotators < 2 {
        let found = format!("{items} items and {annotators} annotators");
        return usage(format!(
            "consensus needs items and at least 2 annotators, not {found}"
        ));
    }
    let out_of_range = |(_, c): &(_, &Option<u32>)| c.is_some_and(|c| c as usize >= classes);
    if let Some(((r, a), Some(c))) = labels.labels.indexed_iter().find(out_of_range) {
        let problem = format!("class {c} is out of range ({classes} classes)");
        return usage(format!("item {r}, annotator {a}: {problem}"));
    }
    let (mut item_start, mut entries) = (vec![0], Vec::new());
    for row in labels.labels.outer_iter() {
        for (a, class) in row.indexed_iter() {
            entries.extend(class.map(|c| (a, c as usize)));
        }
        item_start.push(entries.len());
    }
    let log_prior = None;
    Ok(Problem {
        classes,
        annotators,
        item_start,
        entries,
        log_prior,
    })
}

pub(super) fn find_root(parent: &mut [usize], mut a: usize) -> usize {
    while parent[a] != a {
        parent[a] = parent[parent[a]];
        a = parent[a];
    }
    a
}

/// Refuses annotators without labels, and annotators that never share an
/// item, directly or through others, with annotator 0: their matrices are
/// then not identifiable relative to each other (each group could relabel
/// its classes and fit as well).
pub(super) fn check_annotators(p: &Problem) -> Result<()> {
    if let Some(a) = p.labelled().iter().position(|&n| n == 0) {
        return usage(format!("annotator {a} labels no item"));
    }
    let mut parent: Vec<usize> = (0..p.annotators).collect();
    for r in 0..p.items() {
        for &(a, _) in p.item(r) {
            let first = find_root(&mut parent, p.item(r)[0].0);
            let other = find_root(&mut parent, a);
            parent[first.max(other)] = first.min(other);
        }
    }
    let (inside, outside): (Vec<usize>, Vec<usize>) =
        (0..p.annotators).partition(|&a| find_root(&mut parent, a) == 0);
    if outside.is_empty() {
        return Ok(());
    }
    let why = "so their confusion matrices cannot be estimated on a common scale";
    let fix = "add shared items or fit the groups apart";
    let list = |group: &[usize]| {
        let named: Vec<String> = group.iter().map(|a| format!("annotator {a}")).collect();
        named.join(", ")
    };
    let head = format!(
        "{} never labelled an item that {} labelled",
        list(&outside),
        list(&inside)
    );
    usage(format!("{head}, {why}; {fix}"))
}

/// Checks the classifier's probabilities and turns them into log priors,
/// floored at `PRIOR_FLOOR` and renormalised.
pub(super) fn read_prior(
    prior: ArrayView2<f32>,
    items: usize,
    classes: usize,
) -> Result<Array2<f64>> {
    if prior.dim() != (items, classes) {
        let (rows, columns) = prior.dim();
        let want = format!("{items} items and {classes} classes");
        return usage(format!(
            "the classifier prior is {rows}×{columns}, but there are {want}"
        ));
    }
    let mut out = prior.mapv(|x| f64::from(x).max(PRIOR_FLOOR));
    for (r, row) in prior.outer_iter().enumerate() {
        let sum: f64 = row.iter().map(|&x| f64::from(x)).sum();
        let valid = row.iter().all(|x| x.is_finite() && *x >= 0.0);
        if !valid || (sum - 1.0).abs() > PRIOR_SUM_TOLERANCE {
            let problem = format!("must be probabilities summing to 1 (sum {sum})");
            return usage(format!("the classifier prior of item {r} {problem}"));
        }
    }
    normalise_rows(&mut out);
    Ok(out.mapv(f64::ln))
}
