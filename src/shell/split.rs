//! Splitting a script into statements at `;`, outside quotes and comments.

/// The statements of `script`, trimmed, without empty ones. Comments stay in
/// place (the SQL parser skips them); the returned flag says whether the text
/// ends inside an unfinished statement (for multi-line prompt input).
pub fn statements(script: &str) -> (Vec<String>, bool) {
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

#[cfg(test)]
mod tests {
    use super::statements;

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
