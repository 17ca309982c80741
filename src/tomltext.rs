//! Messages about TOML files people write (models, procedures, limits,
//! claims): where the parser stopped, as a line number, and the parser's
//! words folded onto one line.

/// Byte offset where the parser reports the problem, within `text`.
pub(crate) fn error_offset(text: &str, e: &toml::de::Error) -> Option<usize> {
    e.span().map(|s| s.start.min(text.len()))
}

/// Line number (from 1) of byte offset `at`.
pub(crate) fn line_at(text: &str, at: usize) -> usize {
    text[..at.min(text.len())].matches('\n').count() + 1
}

/// `line N: <message>`, on one line (without the line when it is unknown).
pub(crate) fn describe(text: &str, e: &toml::de::Error) -> String {
    let msg = e.message().trim().replace('\n', " ");
    match error_offset(text, e) {
        Some(at) => format!("line {}: {msg}", line_at(text, at)),
        None => msg,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_the_line() {
        let text = "a = 1\nb = \"x\"\nc = = 3\n";
        let e = toml::from_str::<toml::Value>(text).unwrap_err();
        assert!(
            describe(text, &e).starts_with("line 3: "),
            "{}",
            describe(text, &e)
        );
        assert_eq!(line_at(text, 0), 1);
        assert_eq!(line_at(text, 6), 2);
    }
}
