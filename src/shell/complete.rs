//! Tab completion at the prompt: function, table and column names.

use rustyline::completion::{Completer, Pair};
use rustyline::highlight::Highlighter;
use rustyline::hint::Hinter;
use rustyline::validate::Validator;
use rustyline::{Context, Helper};

/// The words the prompt completes, refreshed before each line.
#[derive(Default)]
pub struct Words(pub Vec<String>);

impl Words {
    /// Every function, table and column name of the session.
    pub async fn of(ctx: &datafusion::prelude::SessionContext) -> Words {
        let state = ctx.state();
        let mut words: Vec<String> = state
            .scalar_functions()
            .keys()
            .chain(state.aggregate_functions().keys())
            .chain(state.window_functions().keys())
            .cloned()
            .collect();
        if let Some(schema) = ctx.catalog("datafusion").and_then(|c| c.schema("public")) {
            for table in schema.table_names() {
                if table.starts_with("__") {
                    continue;
                }
                if let Ok(Some(provider)) = schema.table(&table).await {
                    words.extend(provider.schema().fields().iter().map(|f| f.name().clone()));
                }
                words.push(table);
            }
        }
        words.sort();
        words.dedup();
        Words(words)
    }
}

/// The start of the identifier that ends at `pos`.
fn word_start(line: &str, pos: usize) -> usize {
    line[..pos]
        .char_indices()
        .rev()
        .take_while(|(_, c)| c.is_alphanumeric() || *c == '_')
        .last()
        .map_or(pos, |(i, _)| i)
}

impl Completer for Words {
    type Candidate = Pair;

    fn complete(
        &self,
        line: &str,
        pos: usize,
        _: &Context<'_>,
    ) -> rustyline::Result<(usize, Vec<Pair>)> {
        let start = word_start(line, pos);
        let prefix = line[start..pos].to_ascii_lowercase();
        if prefix.is_empty() {
            return Ok((pos, Vec::new()));
        }
        let matches = self
            .0
            .iter()
            .filter(|w| w.to_ascii_lowercase().starts_with(&prefix))
            .map(|w| Pair {
                display: w.clone(),
                replacement: w.clone(),
            })
            .collect();
        Ok((start, matches))
    }
}

impl Hinter for Words {
    type Hint = String;
}
impl Highlighter for Words {}
impl Validator for Words {}
impl Helper for Words {}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn completes_the_word_before_the_cursor() {
        let words = Words(vec![
            "posterior_mean".into(),
            "posterior_sd".into(),
            "appts".into(),
        ]);
        let history = rustyline::history::DefaultHistory::new();
        let ctx = Context::new(&history);
        let (start, found) = words.complete("SELECT posterior_m", 18, &ctx).unwrap();
        assert_eq!(start, 7);
        assert_eq!(found.len(), 1);
        assert_eq!(found[0].replacement, "posterior_mean");
        let (_, found) = words.complete("FROM APP", 8, &ctx).unwrap();
        assert_eq!(found[0].replacement, "appts");
    }
}
