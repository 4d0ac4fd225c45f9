//! Natural ordering of class names, so that `c2` sorts before `c10`.

use std::cmp::Ordering;

/// Compares two names with runs of ASCII digits compared as whole numbers.
///
/// Numbers compare by value (leading zeros ignored, then fewer zeros first so that the
/// order stays total); text runs compare bytewise. Equal keys fall back to a plain
/// comparison, so distinct strings never compare equal.
pub fn natural_cmp(a: &str, b: &str) -> Ordering {
    let (mut x, mut y) = (a.as_bytes(), b.as_bytes());
    loop {
        match (x.first(), y.first()) {
            (None, None) => return a.cmp(b),
            (None, Some(_)) => return Ordering::Less,
            (Some(_), None) => return Ordering::Greater,
            (Some(cx), Some(cy)) => {
                let ordering = if cx.is_ascii_digit() && cy.is_ascii_digit() {
                    let (nx, rest_x) = split_run(x, true);
                    let (ny, rest_y) = split_run(y, true);
                    x = rest_x;
                    y = rest_y;
                    compare_numbers(nx, ny)
                } else {
                    let (tx, rest_x) = split_run(x, false);
                    let (ty, rest_y) = split_run(y, false);
                    x = rest_x;
                    y = rest_y;
                    tx.cmp(ty)
                };
                if ordering != Ordering::Equal {
                    return ordering;
                }
            }
        }
    }
}

fn split_run(s: &[u8], digits: bool) -> (&[u8], &[u8]) {
    let end = s
        .iter()
        .position(|c| c.is_ascii_digit() != digits)
        .unwrap_or(s.len());
    s.split_at(end)
}

fn compare_numbers(a: &[u8], b: &[u8]) -> Ordering {
    let trim = |s: &[u8]| -> usize { s.iter().take_while(|&&c| c == b'0').count() };
    let (za, zb) = (trim(a), trim(b));
    let (da, db) = (&a[za..], &b[zb..]);
    da.len()
        .cmp(&db.len())
        .then_with(|| da.cmp(db))
        .then_with(|| za.cmp(&zb))
}

/// Sorts names into natural order in place.
pub fn natural_sort(names: &mut [String]) {
    names.sort_by(|a, b| natural_cmp(a, b));
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sorted(names: &[&str]) -> Vec<String> {
        let mut v: Vec<String> = names.iter().map(|s| s.to_string()).collect();
        natural_sort(&mut v);
        v
    }

    #[test]
    fn digits_compare_as_numbers() {
        assert_eq!(sorted(&["c10", "c2", "c1"]), ["c1", "c2", "c10"]);
        assert_eq!(sorted(&["10", "9", "100"]), ["9", "10", "100"]);
    }

    #[test]
    fn text_and_mixed_runs() {
        assert_eq!(
            sorted(&["b", "a10b", "a2c", "a2b"]),
            ["a2b", "a2c", "a10b", "b"]
        );
        assert_eq!(sorted(&["glass", "PET", "can"]), ["PET", "can", "glass"]);
    }

    #[test]
    fn leading_zeros_keep_a_total_order() {
        assert_eq!(sorted(&["c01", "c1", "c001"]), ["c1", "c01", "c001"]);
        assert_ne!(natural_cmp("c01", "c1"), Ordering::Equal);
    }

    #[test]
    fn matches_python_reference_key() {
        // The benchmark scripts in shared/bench sort with re.split(r"(\d+)") keys;
        // these are the orders that key gives (worked by hand).
        assert_eq!(
            sorted(&["c0", "c11", "c3", "c20", "c100"]),
            ["c0", "c3", "c11", "c20", "c100"]
        );
    }
}
