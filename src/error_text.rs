//! One line of text for an error and its causes, and short excerpts of untrusted text
//! (a helper program's output, a file's line) for messages, logs and the journal.

/// The error and its causes joined by `: `, leaving out a cause whose text the message
/// already quotes (library errors name their cause in their own text, so `{:#}` would say it
/// twice).
pub fn chain_text(e: &anyhow::Error) -> String {
    let mut out = String::new();
    for cause in e.chain() {
        let text = cause.to_string();
        if out.contains(&text) {
            continue;
        }
        if !out.is_empty() {
            out.push_str(": ");
        }
        out.push_str(&text);
    }
    out
}

/// Characters of untrusted text quoted in an error, a log line or the journal: enough to
/// recognise the output, never enough to flood a log (a helper may print gigabytes).
pub const EXCERPT_CHARS: usize = 200;

/// At most `max` characters of `text`, control characters escaped (`\n`, `\u{1b}`) so an
/// excerpt stays on one line and cannot drive a terminal; `…` marks a cut.
pub fn excerpt(text: &str, max: usize) -> String {
    let mut out = String::new();
    for (i, c) in text.chars().enumerate() {
        if i == max {
            out.push('…');
            break;
        }
        if c.is_control() {
            out.extend(c.escape_default());
        } else {
            out.push(c);
        }
    }
    out
}

/// [`excerpt`] of bytes that may not be UTF-8 (only the first bytes are decoded).
pub fn excerpt_bytes(bytes: &[u8], max: usize) -> String {
    // 4 bytes per character at most, plus one so a cut still shows the `…`.
    let head = &bytes[..bytes.len().min(4 * max + 4)];
    let mut text = excerpt(&String::from_utf8_lossy(head), max);
    if head.len() < bytes.len() && !text.ends_with('…') {
        text.push('…');
    }
    text
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn excerpts_are_short_and_on_one_line() {
        assert_eq!(excerpt("abc", 5), "abc");
        assert_eq!(excerpt("abcdef", 3), "abc…");
        assert_eq!(excerpt("a\nb\u{1b}[2J", 20), "a\\nb\\u{1b}[2J");
        let big = vec![b'x'; 10_000_000];
        let e = excerpt_bytes(&big, EXCERPT_CHARS);
        assert_eq!(e.chars().count(), EXCERPT_CHARS + 1);
        assert!(e.ends_with('…'));
        assert_eq!(excerpt_bytes(b"ok\xff", 10), "ok\u{fffd}");
    }

    #[test]
    fn a_cause_already_quoted_is_not_repeated() {
        let io = std::io::Error::new(std::io::ErrorKind::NotFound, "no such file");
        let e = anyhow::Error::new(crate::recipe::RecipeError::Io {
            path: "r.toml".into(),
            source: io,
        })
        .context("check stopped");
        assert_eq!(
            chain_text(&e),
            "check stopped: cannot read recipe r.toml: no such file"
        );
        let plain = anyhow::anyhow!("inner").context("outer");
        assert_eq!(chain_text(&plain), "outer: inner");
    }
}
