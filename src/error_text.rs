//! One line of text for an error and its causes.

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

#[cfg(test)]
mod tests {
    use super::*;

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
