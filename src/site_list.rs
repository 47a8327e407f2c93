//! Site numbers as short text for a terminal line: sorted; beyond [`PLAIN_UP_TO`] numbers,
//! runs of consecutive numbers are joined as ranges (`3, 7–12, 40`) and at most [`MAX_RUNS`]
//! runs are shown before a count, so a 1 000-site map with every site failing prints one
//! readable line, not four thousand characters.

/// Up to this many numbers are listed one by one.
pub const PLAIN_UP_TO: usize = 20;

/// How many runs of consecutive numbers are shown before the rest is counted.
pub const MAX_RUNS: usize = 12;

/// `numbers` (any order, repeats ignored) as text, e.g. `3, 7, 8, 40`, or for long lists
/// `1–30, 32, 35–70` or `1, 3, 5, … and 40 more (52 sites)`.
pub fn site_list(numbers: impl IntoIterator<Item = usize>) -> String {
    let mut n: Vec<usize> = numbers.into_iter().collect();
    n.sort_unstable();
    n.dedup();
    if n.len() <= PLAIN_UP_TO {
        return n
            .iter()
            .map(usize::to_string)
            .collect::<Vec<_>>()
            .join(", ");
    }
    let mut runs: Vec<(usize, usize)> = Vec::new();
    for &x in &n {
        match runs.last_mut() {
            Some((_, hi)) if *hi + 1 == x => *hi = x,
            _ => runs.push((x, x)),
        }
    }
    let text = |&(lo, hi): &(usize, usize)| match hi - lo {
        0 => lo.to_string(),
        1 => format!("{lo}, {hi}"),
        _ => format!("{lo}–{hi}"),
    };
    let shown: Vec<String> = runs.iter().take(MAX_RUNS).map(text).collect();
    let mut line = shown.join(", ");
    if runs.len() > MAX_RUNS {
        let hidden: usize = runs[MAX_RUNS..].iter().map(|(lo, hi)| hi - lo + 1).sum();
        line.push_str(&format!(", … and {hidden} more ({} sites)", n.len()));
    }
    line
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn short_lists_are_plain_and_long_runs_become_ranges() {
        assert_eq!(site_list([12, 3, 7, 8, 9, 40, 3]), "3, 7, 8, 9, 12, 40");
        assert_eq!(site_list([]), "");
        assert_eq!(site_list(114..=1115), "114–1115");
        let mut long: Vec<usize> = (1..=30).chain([32, 33]).chain(35..=70).collect();
        long.reverse();
        assert_eq!(site_list(long), "1–30, 32, 33, 35–70");
    }

    #[test]
    fn long_scattered_lists_are_cut_with_a_count() {
        let odd: Vec<usize> = (1..=60).filter(|n| n % 2 == 1).collect();
        let s = site_list(odd);
        assert!(s.starts_with("1, 3, 5,"), "{s}");
        assert!(s.ends_with(", 23, … and 18 more (30 sites)"), "{s}");
    }
}
