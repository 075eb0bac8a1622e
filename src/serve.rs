//! Scoring rows with a serving bundle, without the engine: the feature columns
//! `encode` writes for scored rows (the same names, types and values), computed
//! from the rows' key columns. For services and for Python's `Bundle.score`.

use std::borrow::Cow;
use std::collections::BTreeMap;
use std::sync::Arc;

use datafusion::arrow::array::{
    Array, ArrayRef, AsArray, Float64Array, Int32Array, Int64Array, RecordBatch,
};
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Field, Schema};

use crate::bundle::{Bundle, ColumnEncoding};
use crate::encode::{feature_columns, EncodeError, OutputColumn, Reader};
use crate::family::FamilyError;
use crate::layout::AnyPosterior;

type Result<T> = std::result::Result<T, EncodeError>;

fn usage<T>(message: String) -> Result<T> {
    Err(EncodeError::Usage(message))
}

/// `batch` with every encoded key's feature columns appended, key by key in the
/// bundle's (name) order. Unseen levels and rows with a NULL key column read the
/// prior (indicators 0, code -1). Posterior draws are not part of a bundle.
pub fn score(bundle: &Bundle, batch: &RecordBatch) -> Result<RecordBatch> {
    let mut fields: Vec<Field> = batch
        .schema()
        .fields()
        .iter()
        .map(|f| f.as_ref().clone())
        .collect();
    let mut columns: Vec<ArrayRef> = batch.columns().to_vec();
    let texts = bundle
        .columns
        .iter()
        .map(|(name, encoding)| Ok((name.as_str(), key_texts(name, encoding, batch)?)))
        .collect::<Result<BTreeMap<_, _>>>()?;
    let levels_by_key: BTreeMap<&str, Vec<Option<Cow<'_, str>>>> = bundle
        .columns
        .iter()
        .map(|(name, encoding)| {
            (
                name.as_str(),
                levels_of(encoding, &texts[name.as_str()], batch.num_rows()),
            )
        })
        .collect();
    for (name, encoding) in bundle.keys_in_order() {
        let levels = &levels_by_key[name.as_str()];
        let unseen = |row: usize| unseen_posterior(bundle, &levels_by_key, name, row);
        let readers = bundle
            .readers_of(encoding)
            .iter()
            .map(|r| Reader::parse(r))
            .collect::<Result<Vec<_>>>()?;
        for (column_name, array) in features(name, encoding, &readers, levels, &unseen)? {
            if fields.iter().any(|f| f.name() == &column_name) {
                return usage(format!(
                    "score: the input already has a column '{column_name}', which scoring \
                     would add; drop or rename it"
                ));
            }
            fields.push(Field::new(column_name, array.data_type().clone(), true));
            columns.push(array);
        }
    }
    Ok(RecordBatch::try_new(
        Arc::new(Schema::new(fields)),
        columns,
    )?)
}

/// The key columns of `encoding` in `batch`, as text.
fn key_texts(name: &str, encoding: &ColumnEncoding, batch: &RecordBatch) -> Result<Vec<ArrayRef>> {
    let key_columns = if encoding.key_columns.is_empty() {
        // Version 1 bundles did not record it: the key is the column of its name.
        vec![name.to_string()]
    } else {
        encoding.key_columns.clone()
    };
    let mut texts = Vec::with_capacity(key_columns.len());
    for c in &key_columns {
        let Some(array) = batch.column_by_name(c) else {
            let have: Vec<String> = batch
                .schema()
                .fields()
                .iter()
                .map(|f| f.name().clone())
                .collect();
            return usage(format!(
                "score: key '{name}' needs column '{c}', which the rows do not have (columns: {})",
                have.join(", ")
            ));
        };
        let text = match encoding.whole_floats {
            true => crate::key_text::key_text(array, &DataType::Utf8),
            // Bundles written before key_text read float keys with their fraction.
            false => cast(array, &DataType::Utf8),
        };
        texts.push(text.map_err(|e| {
            EncodeError::Usage(format!(
                "score: column '{c}' of key '{name}' cannot be read as text: {e}"
            ))
        })?);
    }
    Ok(texts)
}

/// Each row's level (`None` when a key column is NULL): the text itself for a
/// plain one-column key (no copy), else built as the bundle says.
fn levels_of<'a>(
    encoding: &ColumnEncoding,
    texts: &'a [ArrayRef],
    rows: usize,
) -> Vec<Option<Cow<'a, str>>> {
    let texts: Vec<_> = texts.iter().map(|t| t.as_string::<i32>()).collect();
    if let [one] = texts.as_slice() {
        if !encoding.normalized {
            return (0..rows)
                .map(|row| one.is_valid(row).then(|| Cow::Borrowed(one.value(row))))
                .collect();
        }
    }
    (0..rows)
        .map(|row| {
            let parts: Vec<Option<&str>> = texts
                .iter()
                .map(|t| t.is_valid(row).then(|| t.value(row)))
                .collect();
            encoding.level_of(&parts).map(Cow::Owned)
        })
        .collect()
}

/// The posterior that scores row `row` of key `name` at a level the bundle does not
/// hold (or a NULL key): the prior, or under `--hierarchy` the prior centred on the
/// row's parent posterior (itself read this way), as the scored table does.
fn unseen_posterior(
    bundle: &Bundle,
    levels: &BTreeMap<&str, Vec<Option<Cow<'_, str>>>>,
    name: &str,
    row: usize,
) -> Result<AnyPosterior> {
    let missing = |key: &str| EncodeError::Usage(format!("score: the bundle has no key '{key}'"));
    let encoding = bundle.columns.get(name).ok_or_else(|| missing(name))?;
    let at = |e: FamilyError| EncodeError::Query(format!("score: key '{name}': {e}"));
    let Some((parent, strength)) = &encoding.parent else {
        return encoding.scoring(None).map_err(at);
    };
    // A bundle built by hand may have parents in a cycle; a read one cannot.
    let mut ancestor = parent;
    for _ in 0..bundle.columns.len() {
        match bundle.columns.get(ancestor).and_then(|c| c.parent.as_ref()) {
            Some((up, _)) => ancestor = up,
            None => break,
        }
    }
    if bundle
        .columns
        .get(ancestor)
        .is_some_and(|c| c.parent.is_some())
    {
        return Err(EncodeError::Usage(format!(
            "score: the parents of key '{name}' form a cycle"
        )));
    }
    let (up_encoding, up_levels) = bundle
        .columns
        .get(parent)
        .zip(levels.get(parent.as_str()))
        .ok_or_else(|| missing(parent))?;
    let level = up_levels.get(row).and_then(|l| l.as_deref());
    let up = match level.filter(|l| up_encoding.levels.contains_key(*l)) {
        Some(l) => up_encoding.scoring(Some(l)).map_err(at)?,
        None => unseen_posterior(bundle, levels, parent, row)?,
    };
    encoding.prior.under(&up, None, *strength).map_err(at)
}

/// The feature columns of one key for rows at `levels`; `unseen(row)` is the
/// posterior of a row whose level the bundle does not hold, under `--hierarchy`.
fn features(
    name: &str,
    encoding: &ColumnEncoding,
    readers: &[Reader],
    levels: &[Option<Cow<'_, str>>],
    unseen: &dyn Fn(usize) -> Result<AnyPosterior>,
) -> Result<Vec<(String, ArrayRef)>> {
    let classes = match &encoding.prior {
        AnyPosterior::Dirichlet(d) => d.prior.classes.clone(),
        _ => Vec::new(),
    };
    let outputs = feature_columns(
        name,
        encoding.treatment,
        encoding.indicators.len(),
        readers,
        &classes,
        false,
    );
    // Readers are computed once per level (quantiles are the costly part).
    // The engine's hash map (a fast hasher): one lookup per row.
    let mut cache: datafusion::common::HashMap<Option<&str>, Vec<f64>> = Default::default();
    let reader_outputs: Vec<(usize, Option<&str>)> = outputs
        .iter()
        .filter_map(|(_, c)| match c {
            OutputColumn::Reader { index, class } => Some((*index, class.as_deref())),
            _ => None,
        })
        .collect();
    let mut values: Vec<Vec<f64>> = vec![Vec::with_capacity(levels.len()); reader_outputs.len()];
    for (r, level) in levels.iter().enumerate() {
        let level = level.as_deref();
        if encoding.parent.is_some() && !level.is_some_and(|l| encoding.levels.contains_key(l)) {
            // Its posterior depends on the row's parent: read per row.
            let p = unseen(r)?;
            for (column, (index, class)) in values.iter_mut().zip(&reader_outputs) {
                column.push(readers[*index].value(&p, *class)?);
            }
            continue;
        }
        let row = match cache.entry(level) {
            datafusion::common::hash_map::Entry::Occupied(row) => row.into_mut(),
            datafusion::common::hash_map::Entry::Vacant(slot) => {
                let p = encoding.scoring(level).map_err(|e| {
                    EncodeError::Query(format!("score: key '{name}', level {level:?}: {e}"))
                })?;
                slot.insert(
                    reader_outputs
                        .iter()
                        .map(|(index, class)| readers[*index].value(&p, *class))
                        .collect::<Result<Vec<f64>>>()?,
                )
            }
        };
        for (column, v) in values.iter_mut().zip(row.iter()) {
            column.push(*v);
        }
    }
    let codes = encoding.codes();
    let mut values = values.into_iter();
    let mut out = Vec::with_capacity(outputs.len());
    for (column_name, column) in outputs {
        let array: ArrayRef = match column {
            OutputColumn::Reader { .. } => {
                Arc::new(Float64Array::from(values.next().unwrap_or_default()))
            }
            OutputColumn::Indicator { rank } => {
                let wanted = encoding.indicators.get(rank - 1).map(String::as_str);
                Arc::new(Int32Array::from_iter_values(
                    levels
                        .iter()
                        .map(|l| i32::from(l.as_deref() == wanted && wanted.is_some())),
                ))
            }
            OutputColumn::Code => Arc::new(Int64Array::from_iter_values(levels.iter().map(|l| {
                l.as_deref()
                    .and_then(|l| codes.get(l).copied())
                    .unwrap_or(-1)
            }))),
            OutputColumn::Draw { .. } => continue,
        };
        out.push((column_name, array));
    }
    Ok(out)
}
