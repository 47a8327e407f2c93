//! The words of a G-code line as the virtual controller reads them: comments removed,
//! letter–number words split, errors numbered as grbl numbers them.

/// Whether a line, comments and case aside, is exactly `code` (`m410 ; stop` is `M410`).
pub fn is_code(line: &str, code: &str) -> bool {
    strip_comments(line).trim().eq_ignore_ascii_case(code)
}

/// Removes `( … )` and `; …` comments.
pub fn strip_comments(line: &str) -> String {
    let mut out = String::new();
    let mut depth = 0;
    for c in line.chars() {
        match c {
            ';' if depth == 0 => break,
            '(' => depth += 1,
            ')' if depth > 0 => depth -= 1,
            _ if depth == 0 => out.push(c),
            _ => {}
        }
    }
    out
}

/// Letter–number words of a line (`G1X10 Y2.5` → G1, X10, Y2.5); `Err(code)` as grbl numbers
/// them: 1 = letter expected, 2 = bad number.
pub fn parse_words(line: &str) -> Result<Vec<(char, f64)>, u32> {
    let chars: Vec<char> = line.chars().filter(|c| !c.is_whitespace()).collect();
    let mut words = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        let l = chars[i];
        if !l.is_ascii_alphabetic() {
            return Err(1);
        }
        let start = i + 1;
        let mut j = start;
        while j < chars.len() && (chars[j].is_ascii_digit() || matches!(chars[j], '.' | '-' | '+'))
        {
            j += 1;
        }
        let num: String = chars[start..j].iter().collect();
        let v = num.parse::<f64>().map_err(|_| 2u32)?;
        words.push((l, v));
        i = j;
    }
    Ok(words)
}
