//! The JSON serving bundle written by `posterity encode`: the prior and every
//! level's posterior per encoded column, enough to score rows without the engine.
//!
//! ```json
//! {
//!   "format": "posterity-bundle", "version": 2,
//!   "target": "no_show", "family": "Beta",
//!   "readers": ["mean", "sd"],
//!   "columns": {
//!     "breed": {
//!       "key": {"columns": ["breed"], "form": "text"},
//!       "prior":  {"a0": 0.5, "b0": 0.5, "successes": 0, "trials": 0},
//!       "levels": {"breed_001": {"a0": 0.5, "b0": 0.5, "successes": 12, "trials": 130}}
//!     }
//!   }
//! }
//! ```
//!
//! Each posterior object has exactly the fields of the posterior value format
//! (README, "Posterior value format"); levels are sorted by name. A level that is
//! not in `levels` (or a NULL key) is scored with `prior`.
//!
//! `key` says how a level is made from a row: `text` is the one column's text
//! as written; `length_prefixed` (interactions) is each column's text prefixed
//! by its length in Unicode characters and `:`, joined by `|` — `9:breed_017|9:clinic_03`
//! — which no two different rows can share ([`interaction_key`]). Version 1
//! bundles (no `key`; interactions joined by a bare `|`) are still read. A column
//! may list its own `readers` (version 4), which replace the bundle's for it. A
//! count target read with an exposure column names it in a top-level `exposure`,
//! which refreshes read (scoring does not need it); `key_order` lists the keys in
//! the order the run wrote their columns, which scoring keeps.

use std::collections::{BTreeMap, HashMap};

use serde_json::{json, Map, Value};

use crate::encode::Treatment;
use crate::family::{
    BetaPosterior, DirichletPosterior, DirichletPrior, FamilyError, GammaPosterior, NigPosterior,
    NigPrior,
};
use crate::layout::AnyPosterior;

pub const FORMAT: &str = "posterity-bundle";
/// The newest version this build reads. It writes version 4 only when a column has
/// readers of its own (older readers would score it with the bundle's), else 3.
pub const VERSION: u64 = 4;

/// Messy key text made comparable: Unicode compatibility form (NFKC: full-width
/// letters, ligatures, non-breaking spaces), lower case, surrounding space removed
/// and inner runs of white space as one space. `normalize_key` in SQL is the same.
pub fn normalize_key(text: &str) -> String {
    use unicode_normalization::UnicodeNormalization;
    let folded: String = text.nfkc().collect::<String>().to_lowercase();
    folded.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// The level of an interaction row: each part prefixed by its length in
/// characters and `:`, joined by `|`. Collision-free: the lengths say where each
/// part ends, whatever characters the parts contain.
pub fn interaction_key(parts: &[&str]) -> String {
    parts
        .iter()
        .map(|p| format!("{}:{p}", p.chars().count()))
        .collect::<Vec<_>>()
        .join("|")
}

/// The parts of an interaction's level (what [`interaction_key`] built), or None when the
/// text is not one.
pub fn interaction_parts(level: &str) -> Option<Vec<String>> {
    let mut parts = Vec::new();
    let mut rest = level;
    loop {
        let (length, tail) = rest.split_once(':')?;
        let length: usize = length.parse().ok()?;
        if tail.chars().count() < length {
            return None;
        }
        let end = tail
            .char_indices()
            .nth(length)
            .map_or(tail.len(), |(i, _)| i);
        parts.push(tail[..end].to_string());
        rest = &tail[end..];
        match rest.strip_prefix('|') {
            Some(next) => rest = next,
            None if rest.is_empty() => return Some(parts),
            None => return None,
        }
    }
}

/// A posterior as a JSON object with the value format's field names.
pub fn posterior_json(p: &AnyPosterior) -> Value {
    match p {
        AnyPosterior::Beta(b) => {
            json!({"a0": b.prior.a0, "b0": b.prior.b0, "successes": b.successes, "trials": b.trials})
        }
        AnyPosterior::Gamma(g) => {
            json!({"shape0": g.prior.shape0, "rate0": g.prior.rate0, "events": g.events, "exposure": g.exposure})
        }
        AnyPosterior::Nig(n) => json!({
            "mu0": n.prior.mu0, "kappa0": n.prior.kappa0, "alpha0": n.prior.alpha0, "beta0": n.prior.beta0,
            "n": n.stats.n, "mean": n.stats.mean, "m2": n.stats.m2
        }),
        AnyPosterior::Dirichlet(d) => {
            json!({"classes": d.prior.classes, "a0": d.prior.alpha0, "counts": d.counts})
        }
    }
}

/// The text elements of an optional JSON list (none when absent).
fn texts_of(v: Option<&Value>) -> Vec<String> {
    v.and_then(Value::as_array)
        .map(|a| {
            a.iter()
                .filter_map(|x| x.as_str().map(str::to_string))
                .collect()
        })
        .unwrap_or_default()
}

fn bad(message: impl Into<String>) -> FamilyError {
    FamilyError::InvalidClasses(format!("serving bundle: {}", message.into()))
}

/// Read a posterior object back.
pub fn posterior_from_json(v: &Value) -> Result<AnyPosterior, FamilyError> {
    let num = |name: &str| -> Result<f64, FamilyError> {
        v.get(name)
            .and_then(Value::as_f64)
            .ok_or_else(|| bad(format!("field '{name}' missing or not a number")))
    };
    let nums = |name: &str| -> Result<Vec<f64>, FamilyError> {
        v.get(name)
            .and_then(Value::as_array)
            .ok_or_else(|| bad(format!("field '{name}' missing or not a list")))?
            .iter()
            .map(|x| {
                x.as_f64()
                    .ok_or_else(|| bad(format!("'{name}' holds a non-number")))
            })
            .collect()
    };
    if v.get("classes").is_some() {
        let classes = v["classes"]
            .as_array()
            .ok_or_else(|| bad("'classes' is not a list"))?
            .iter()
            .map(|c| {
                c.as_str()
                    .map(str::to_string)
                    .ok_or_else(|| bad("a class is not text"))
            })
            .collect::<Result<Vec<_>, _>>()?;
        let prior = DirichletPrior::new(classes, nums("a0")?)?;
        return Ok(AnyPosterior::Dirichlet(DirichletPosterior::from_parts(
            prior,
            nums("counts")?,
        )?));
    }
    if v.get("mu0").is_some() {
        let prior = NigPrior::new(num("mu0")?, num("kappa0")?, num("alpha0")?, num("beta0")?)?;
        return Ok(AnyPosterior::Nig(NigPosterior::from_parts(
            prior,
            num("n")?,
            num("mean")?,
            num("m2")?,
        )?));
    }
    if v.get("shape0").is_some() {
        return Ok(AnyPosterior::Gamma(GammaPosterior::from_parts(
            num("shape0")?,
            num("rate0")?,
            num("events")?,
            num("exposure")?,
        )?));
    }
    if v.get("a0").is_none() || v.get("successes").is_none() {
        let fields: Vec<&str> = v
            .as_object()
            .map(|o| o.keys().map(String::as_str).collect())
            .unwrap_or_default();
        return Err(FamilyError::UnknownShape(format!(
            "serving bundle: {{{}}} is not a posterior of any family (Beta has a0, b0, \
             successes, trials; Gamma shape0, rate0, events, exposure; NIG mu0, kappa0, alpha0, \
             beta0, n, mean, m2; Dirichlet classes, a0, counts)",
            fields.join(", ")
        )));
    }
    Ok(AnyPosterior::Beta(BetaPosterior::from_parts(
        num("a0")?,
        num("b0")?,
        num("successes")?,
        num("trials")?,
    )?))
}

/// One encoded column of a bundle.
#[derive(Debug, Clone)]
pub struct ColumnEncoding {
    /// The input columns the key is built from (one, or several for an interaction).
    pub key_columns: Vec<String>,
    /// Whether each column's text went through [`normalize_key`] first.
    pub normalized: bool,
    /// Whether float key values were read by [`crate::key_text`] (whole values as
    /// integers, NaN as NULL): true for bundles this build writes; bundles written
    /// before it read floats with their fraction ("106.0"), and are scored so.
    pub whole_floats: bool,
    pub prior: AnyPosterior,
    pub levels: BTreeMap<String, AnyPosterior>,
    /// The levels with an indicator column, in rank order: `<key>_top1` is 1 for
    /// rows of the first, and so on (empty when there are none).
    pub indicators: Vec<String>,
    /// The factor on each level's data before readers score a row: (k-1)/k after
    /// k-fold encoding, so scored rows read posteriors with the data weight the
    /// training rows' out-of-fold posteriors had (1 when absent).
    pub score_scale: f64,
    /// What the key became in the training and scored tables.
    pub treatment: Treatment,
    /// This key's readers when they differ from the bundle's (`Bundle::readers_of`).
    pub readers: Option<Vec<String>>,
    /// Under `--hierarchy`: the parent key and the layer's strength. An unseen level
    /// (or NULL key) is scored with `prior` centred on the row's parent posterior.
    pub parent: Option<(String, f64)>,
    /// Under `--hierarchy`: each level's parent level (the one most of its rows
    /// have) and, for a level with rows elsewhere too, its data outside that parent
    /// — what a refresh (`--update`) needs to recentre the level exactly.
    pub parent_levels: BTreeMap<String, (String, Option<AnyPosterior>)>,
}

impl ColumnEncoding {
    /// The level of a row given its key columns' text (`None` when any is NULL).
    pub fn level_of(&self, values: &[Option<&str>]) -> Option<String> {
        let parts: Option<Vec<String>> = values
            .iter()
            .map(|v| {
                v.map(|v| match self.normalized {
                    true => normalize_key(v),
                    false => v.to_string(),
                })
            })
            .collect();
        let parts = parts?;
        let parts: Vec<&str> = parts.iter().map(String::as_str).collect();
        match parts.as_slice() {
            [one] if self.key_columns.len() <= 1 => Some(one.to_string()),
            parts => Some(interaction_key(parts)),
        }
    }

    /// How a level is built, as written in the bundle.
    fn key_form(&self) -> &'static str {
        if self.key_columns.len() > 1 {
            "length_prefixed"
        } else {
            "text"
        }
    }

    /// The posterior of all training rows for a level, the prior for unseen levels
    /// and NULL keys.
    pub fn lookup(&self, level: Option<&str>) -> &AnyPosterior {
        level
            .and_then(|l| self.levels.get(l))
            .unwrap_or(&self.prior)
    }

    /// The integer code of every level (`Treatment::Codes`): its position among the
    /// sorted training levels. Unseen levels and NULL keys have code -1.
    pub fn codes(&self) -> HashMap<&str, i64> {
        self.levels
            .keys()
            .zip(0i64..)
            .map(|(level, code)| (level.as_str(), code))
            .collect()
    }

    /// The posterior a row of this level is scored with: [`lookup`](Self::lookup)
    /// with its data scaled by `score_scale` (the readers of `scored` and of the
    /// encoding tables).
    pub fn scoring(&self, level: Option<&str>) -> Result<AnyPosterior, FamilyError> {
        let p = self.lookup(level);
        if self.score_scale < 1.0 {
            p.scale(self.score_scale)
        } else {
            Ok(p.clone())
        }
    }
}

/// A parsed serving bundle.
#[derive(Debug, Clone)]
pub struct Bundle {
    pub target: String,
    pub family: String,
    /// The exposure column of a Gamma target, when the run read one: a refresh
    /// reads the new rows' exposures from it too.
    pub exposure: Option<String>,
    /// The keys in the order the run wrote their columns (scoring appends them in
    /// this order); bundles without `key_order` list them by name.
    pub key_order: Vec<String>,
    pub readers: Vec<String>,
    pub columns: BTreeMap<String, ColumnEncoding>,
}

impl Bundle {
    /// Every column the bundle's keys read (an interaction reads several), as a
    /// refresh registers its new rows with them.
    pub fn key_columns(&self) -> Vec<String> {
        self.columns
            .values()
            .flat_map(|c| c.key_columns.clone())
            .collect()
    }

    /// The encoded keys in the order the run wrote their columns.
    pub fn keys_in_order(&self) -> impl Iterator<Item = (&String, &ColumnEncoding)> {
        let listed = self
            .key_order
            .iter()
            .filter_map(|k| self.columns.get_key_value(k));
        let rest = self
            .columns
            .iter()
            .filter(|(k, _)| !self.key_order.contains(k));
        listed.chain(rest)
    }

    /// The readers that score `column`: its own, or the bundle's.
    pub fn readers_of<'a>(&'a self, column: &'a ColumnEncoding) -> &'a [String] {
        column.readers.as_deref().unwrap_or(&self.readers)
    }

    /// Serialise (sorted keys, so the same encodings give the same bytes).
    pub fn to_json(&self) -> String {
        let mut columns = Map::new();
        for (name, c) in &self.columns {
            let levels: Map<String, Value> = c
                .levels
                .iter()
                .map(|(k, p)| (k.clone(), posterior_json(p)))
                .collect();
            let mut column = json!({
                "key": {"columns": c.key_columns, "form": c.key_form(), "normalize": c.normalized,
                        "floats": if c.whole_floats { "whole_as_integer" } else { "as_text" }},
                "prior": posterior_json(&c.prior),
                "levels": levels
            });
            if !c.indicators.is_empty() {
                column["indicators"] = json!(c.indicators);
            }
            if c.treatment != Treatment::Posterior {
                column["treatment"] = json!(c.treatment.name());
            }
            if c.score_scale != 1.0 {
                column["score_scale"] = json!(c.score_scale);
            }
            if let Some(readers) = &c.readers {
                column["readers"] = json!(readers);
            }
            if let Some((parent, strength)) = &c.parent {
                let levels: Map<String, Value> = c
                    .parent_levels
                    .iter()
                    .map(|(level, (parent, _))| (level.clone(), json!(parent)))
                    .collect();
                let outside: Map<String, Value> = c
                    .parent_levels
                    .iter()
                    .filter_map(|(level, (_, out))| {
                        out.as_ref().map(|p| (level.clone(), posterior_json(p)))
                    })
                    .collect();
                column["parent"] = json!({"key": parent, "strength": strength, "levels": levels});
                if !outside.is_empty() {
                    column["parent"]["outside"] = Value::Object(outside);
                }
            }
            columns.insert(name.clone(), column);
        }
        let mut v = json!({
            "format": FORMAT,
            "version": if self.columns.values().any(|c| c.readers.is_some() || c.parent.is_some()) { VERSION } else { 3 },
            "target": self.target,
            "family": self.family,
            "readers": self.readers,
            "columns": columns,
        });
        if let Some(exposure) = &self.exposure {
            v["exposure"] = json!(exposure);
        }
        if !self.key_order.is_empty() {
            v["key_order"] = json!(self.key_order);
        }
        serde_json::to_string_pretty(&v).unwrap_or_default()
    }

    pub fn from_json(text: &str) -> Result<Bundle, FamilyError> {
        let v: Value =
            serde_json::from_str(text).map_err(|e| bad(format!("not valid JSON: {e}")))?;
        if v.get("format").and_then(Value::as_str) != Some(FORMAT) {
            return Err(bad("not a posterity bundle (field 'format')"));
        }
        let version = v.get("version").and_then(Value::as_u64);
        if !matches!(version, Some(1..=VERSION)) {
            return Err(bad(format!(
                "unsupported version {:?}; this build reads versions 1 to {VERSION}",
                v.get("version")
            )));
        }
        let text_of = |k: &str| {
            v.get(k)
                .and_then(Value::as_str)
                .unwrap_or_default()
                .to_string()
        };
        let mut columns = BTreeMap::new();
        for (name, c) in v
            .get("columns")
            .and_then(Value::as_object)
            .ok_or_else(|| bad("'columns' missing"))?
        {
            let prior = posterior_from_json(
                c.get("prior")
                    .ok_or_else(|| bad(format!("column '{name}' has no prior")))?,
            )?;
            // A hand-made or altered bundle must not score silently as something else:
            // every level is a posterior of the prior's family (and classes).
            let mut levels = BTreeMap::new();
            let map = c.get("levels").and_then(Value::as_object).ok_or_else(|| {
                bad(format!(
                    "column '{name}': 'levels' is missing or not an object of level to posterior"
                ))
            })?;
            for (level, p) in map {
                let p = posterior_from_json(p)?;
                if !same_family(&prior, &p) {
                    return Err(bad(format!(
                        "column '{name}': level '{level}' is a {} posterior, the prior a {} one",
                        family_words(&p),
                        family_words(&prior)
                    )));
                }
                levels.insert(level.clone(), p);
            }
            for reader in c
                .get("readers")
                .map(|r| texts_of(Some(r)))
                .unwrap_or_default()
            {
                check_reader(&reader).map_err(|e| bad(format!("column '{name}': {e}")))?;
            }
            let key_columns = match c.get("key") {
                Some(key) => {
                    let columns = key
                        .get("columns")
                        .and_then(Value::as_array)
                        .ok_or_else(|| bad(format!("column '{name}': key has no 'columns' list")))?
                        .iter()
                        .map(|c| c.as_str().map(str::to_string))
                        .collect::<Option<Vec<_>>>()
                        .ok_or_else(|| bad(format!("column '{name}': a key column is not text")))?;
                    if columns.is_empty() {
                        return Err(bad(format!("column '{name}': its key names no columns")));
                    }
                    let form = key.get("form").and_then(Value::as_str);
                    let expected = if columns.len() > 1 {
                        "length_prefixed"
                    } else {
                        "text"
                    };
                    if form != Some(expected) {
                        return Err(bad(format!(
                            "column '{name}': key form {form:?} is not '{expected}'"
                        )));
                    }
                    columns
                }
                // Version 1 did not record the key's columns.
                None => Vec::new(),
            };
            columns.insert(
                name.clone(),
                ColumnEncoding {
                    key_columns,
                    normalized: c
                        .get("key")
                        .and_then(|k| k.get("normalize"))
                        .and_then(Value::as_bool)
                        .unwrap_or(false),
                    whole_floats: c
                        .get("key")
                        .and_then(|k| k.get("floats"))
                        .and_then(Value::as_str)
                        == Some("whole_as_integer"),
                    prior,
                    levels,
                    indicators: texts_of(c.get("indicators")),
                    readers: c.get("readers").map(|r| texts_of(Some(r))),
                    parent: match c.get("parent") {
                        None => None,
                        Some(p) => Some((
                            p.get("key")
                                .and_then(Value::as_str)
                                .map(str::to_string)
                                .ok_or_else(|| {
                                    bad(format!("column '{name}': parent has no key"))
                                })?,
                            p.get("strength")
                                .and_then(Value::as_f64)
                                .filter(|s| s.is_finite() && *s > 0.0)
                                .ok_or_else(|| {
                                    bad(format!(
                                        "column '{name}': parent strength is not a number > 0"
                                    ))
                                })?,
                        )),
                    },
                    parent_levels: parent_levels(name, c.get("parent"))?,
                    treatment: match c.get("treatment").and_then(Value::as_str) {
                        None => Treatment::Posterior,
                        Some(t) => Treatment::parse(t).map_err(|_| {
                            bad(format!(
                                "column '{name}': treatment '{t}' is not posterior, levels or codes"
                            ))
                        })?,
                    },
                    score_scale: match c.get("score_scale") {
                        None => 1.0,
                        Some(v) => {
                            v.as_f64()
                                .filter(|s| *s > 0.0 && *s <= 1.0)
                                .ok_or_else(|| {
                                    bad(format!("column '{name}': score_scale is not in (0, 1]"))
                                })?
                        }
                    },
                },
            );
        }
        // Every parent is a column of the bundle, and no column is its own ancestor.
        for name in columns.keys() {
            let mut at = name;
            for _ in 0..=columns.len() {
                match &columns[at].parent {
                    None => break,
                    Some((parent, _)) if columns.contains_key(parent) => at = parent,
                    Some((parent, _)) => {
                        return Err(bad(format!(
                            "column '{at}': parent '{parent}' is not a column of the bundle"
                        )))
                    }
                }
            }
            if columns[at].parent.is_some() {
                return Err(bad(format!(
                    "column '{name}' is its own ancestor (parents form a cycle)"
                )));
            }
        }
        let key_order = texts_of(v.get("key_order"));
        if let Some(unknown) = key_order.iter().find(|k| !columns.contains_key(*k)) {
            return Err(bad(format!(
                "key_order names '{unknown}', which is not a column of the bundle"
            )));
        }
        let readers = texts_of(v.get("readers"));
        for reader in &readers {
            check_reader(reader).map_err(bad)?;
        }
        Ok(Bundle {
            target: text_of("target"),
            family: text_of("family"),
            exposure: v
                .get("exposure")
                .and_then(Value::as_str)
                .map(str::to_string),
            key_order,
            readers,
            columns,
        })
    }
}

/// Whether `p` is a posterior of `prior`'s family (for Dirichlet: of its classes).
fn same_family(prior: &AnyPosterior, p: &AnyPosterior) -> bool {
    match (prior, p) {
        (AnyPosterior::Dirichlet(a), AnyPosterior::Dirichlet(b)) => {
            a.prior.classes == b.prior.classes
        }
        _ => prior.kind() == p.kind(),
    }
}

fn family_words(p: &AnyPosterior) -> String {
    match p {
        AnyPosterior::Dirichlet(d) => format!("Dirichlet (classes {:?})", d.prior.classes),
        other => other.kind().name().to_string(),
    }
}

/// A reader's name as this build reads it, or why not.
fn check_reader(reader: &str) -> Result<(), String> {
    crate::encode::Reader::parse(reader).map(|_| ()).map_err(|_| {
        format!("reader '{reader}' is not one this build reads (mean, sd, var, data_weight, qNN, above:T)")
    })
}

/// A child column's parent levels and data outside them (`"parent": {"levels":
/// {level: parent level}, "outside": {level: posterior}}`); empty when absent.
fn parent_levels(
    name: &str,
    parent: Option<&Value>,
) -> Result<BTreeMap<String, (String, Option<AnyPosterior>)>, FamilyError> {
    let mut out = BTreeMap::new();
    let Some(parent) = parent else {
        return Ok(out);
    };
    if let Some(levels) = parent.get("levels") {
        let levels = levels
            .as_object()
            .ok_or_else(|| bad(format!("column '{name}': parent levels are not an object")))?;
        for (level, p) in levels {
            let p = p.as_str().ok_or_else(|| {
                bad(format!(
                    "column '{name}': the parent of level '{level}' is not text"
                ))
            })?;
            out.insert(level.clone(), (p.to_string(), None));
        }
    }
    if let Some(outside) = parent.get("outside").and_then(Value::as_object) {
        for (level, p) in outside {
            let entry = out.get_mut(level).ok_or_else(|| {
                bad(format!(
                    "column '{name}': level '{level}' has data outside a parent it does not list"
                ))
            })?;
            entry.1 = Some(posterior_from_json(p)?);
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interaction_parts_undo_interaction_key() {
        for parts in [vec!["12.0", "clinic_01"], vec!["", "a|b:c", "é"], vec!["x"]] {
            let level = interaction_key(&parts);
            assert_eq!(interaction_parts(&level).unwrap(), parts, "{level}");
        }
        for not_one in ["12", "3:ab", "2:ab|", "2:abc", "x:ab", "1:é|"] {
            assert_eq!(interaction_parts(not_one), None, "{not_one}");
        }
    }
}
