//! Shared by the recipe and machine-file validation tests: break one line of a valid base
//! file and read back the single problem it causes.

use isopach::recipe::Located;

/// `base` with the line starting with `key` replaced by `line`; the one problem `problems`
/// reports for it (the test fails when there are none or several).
pub fn one_problem(
    base: &str,
    key: &str,
    line: &str,
    problems: impl Fn(&str) -> Vec<Located>,
) -> Located {
    let text: String = base
        .lines()
        .map(|l| if l.starts_with(key) { line } else { l })
        .collect::<Vec<_>>()
        .join("\n");
    let p = problems(&text);
    assert_eq!(p.len(), 1, "expected one problem for {line:?}, got {p:#?}");
    p.into_iter().next().unwrap()
}
