//! Splitting a script into statements at `;`, outside quotes and comments.

/// The statements of `script`, trimmed, without empty ones. Comments are removed
/// (a line comment leaves its line break, a block comment a space); the returned
/// flag says whether the text ends inside an unfinished statement (for multi-line
/// prompt input).
pub fn statements(script: &str) -> (Vec<String>, bool) {
    // A byte-order mark, as some editors start a saved file with, is not SQL.
    let script = script.strip_prefix('\u{feff}').unwrap_or(script);
    let mut out = Vec::new();
    let mut current = String::new();
    let mut chars = script.chars().peekable();
    let mut quote: Option<char> = None;
    while let Some(c) = chars.next() {
        match quote {
            Some(q) => {
                current.push(c);
                if c == q {
                    quote = None;
                }
            }
            None => match c {
                '\'' | '"' => {
                    quote = Some(c);
                    current.push(c);
                }
                '-' if chars.peek() == Some(&'-') => {
                    // Line comment: skip to the end of the line.
                    for d in chars.by_ref() {
                        if d == '\n' {
                            current.push('\n');
                            break;
                        }
                    }
                }
                '/' if chars.peek() == Some(&'*') => {
                    chars.next();
                    let mut prev = ' ';
                    for d in chars.by_ref() {
                        if prev == '*' && d == '/' {
                            break;
                        }
                        prev = d;
                    }
                    current.push(' ');
                }
                ';' => {
                    if !current.trim().is_empty() {
                        out.push(current.trim().to_string());
                    }
                    current.clear();
                }
                _ => current.push(c),
            },
        }
    }
    let unfinished = !current.trim().is_empty();
    if unfinished {
        out.push(current.trim().to_string());
    }
    (out, unfinished)
}

/// What is still open at the end of `text`: a quote character if it ends inside a
/// quoted string, else one `(` per unclosed parenthesis (for the prompt).
pub fn open_marks(text: &str) -> String {
    let mut quote: Option<char> = None;
    let mut depth = 0usize;
    let mut chars = text.chars().peekable();
    while let Some(c) = chars.next() {
        match (quote, c) {
            (Some(q), c) if c == q => quote = None,
            (Some(_), _) => {}
            (None, '\'' | '"') => quote = Some(c),
            (None, '-') if chars.peek() == Some(&'-') => {
                for d in chars.by_ref() {
                    if d == '\n' {
                        break;
                    }
                }
            }
            (None, '(') => depth += 1,
            (None, ')') => depth = depth.saturating_sub(1),
            _ => {}
        }
    }
    match quote {
        Some(q) => q.to_string(),
        None => "(".repeat(depth.min(8)),
    }
}

#[cfg(test)]
mod tests {
    use super::{open_marks, statements};

    #[test]
    fn open_marks_show_quotes_and_parentheses() {
        assert_eq!(open_marks("SELECT 'it"), "'");
        assert_eq!(open_marks("SELECT f((1"), "((");
        assert_eq!(open_marks("SELECT ')' -- (\n"), "");
    }

    #[test]
    fn splits_outside_quotes_and_comments() {
        let (s, open) = statements("SELECT ';' AS a; -- note; here\nSELECT 2 /* ; */ ;\n");
        assert_eq!(s, vec!["SELECT ';' AS a", "SELECT 2"]);
        assert!(!open);
        let (s, open) = statements("SELECT 1;\nSELECT\n 2");
        assert_eq!(s.len(), 2);
        assert!(open);
    }
}
