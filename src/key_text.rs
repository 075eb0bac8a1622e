//! The text of a key value, as encode, `fold_of` and the serving bundle read it.
//!
//! Levels are matched by their text, so one key must give one text whatever type
//! its column has in a given table. Text is itself, and other types go through
//! their text form, with one exception: a floating-point number with a whole value
//! is written as the integer it is ("106", not "106.0"), and NaN is no value
//! (NULL). An integer column that became floats to hold a missing value — what
//! pandas does — still meets the levels it was trained with, instead of every row
//! reading the prior.

use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, AsArray, StringArray};
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Float64Type};
use datafusion::arrow::error::ArrowError;

/// Whole floats within the 64-bit integer range are written as integers (the value
/// a float holds is exact; beyond 2^53 it may differ from the integer it was made
/// from, which no text could recover); larger ones keep their float text.
const INTEGER_RANGE: f64 = 9_223_372_036_854_775_808.0;

/// Each value's key text (see the module documentation) as `text_type` (Utf8, what
/// the SQL function `key_text` and the bundle's lookups give, or Utf8View); NULL
/// stays NULL. Text already of that type is returned as it is.
pub fn key_text(values: &ArrayRef, text_type: &DataType) -> Result<ArrayRef, ArrowError> {
    match values.data_type() {
        DataType::Dictionary(_, inner) => key_text(&cast(values, inner)?, text_type),
        t if t.is_floating() => {
            let text = cast(values, &DataType::Utf8)?;
            let text = text.as_string::<i32>();
            let numbers = cast(values, &DataType::Float64)?;
            let numbers = numbers.as_primitive::<Float64Type>();
            let out: StringArray = (0..values.len())
                .map(|i| {
                    if numbers.is_null(i) {
                        return None;
                    }
                    let v = numbers.value(i);
                    (!v.is_nan()).then(|| float_text(v, text.value(i)))
                })
                .collect();
            cast(&(Arc::new(out) as ArrayRef), text_type)
        }
        _ => cast(values, text_type),
    }
}

/// Whether a column of type `t` is read as floats by [`key_text`] (directly or
/// through a dictionary).
pub fn is_float(t: &DataType) -> bool {
    match t {
        DataType::Dictionary(_, inner) => is_float(inner),
        t => t.is_floating(),
    }
}

/// The key text of a float that is not NaN: the integer it is when whole and
/// within the 64-bit integer range, else `text`, its text form.
pub fn float_text(v: f64, text: &str) -> String {
    if v == v.trunc() && (-INTEGER_RANGE..INTEGER_RANGE).contains(&v) {
        (v as i64).to_string()
    } else {
        text.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use datafusion::arrow::array::{Float32Array, Float64Array, Int64Array};

    fn texts(values: ArrayRef) -> Vec<Option<String>> {
        key_text(&values, &DataType::Utf8View)
            .unwrap()
            .as_string_view()
            .iter()
            .map(|t| t.map(str::to_string))
            .collect()
    }

    #[test]
    fn whole_floats_read_as_the_integers_they_are() {
        let floats = Arc::new(Float64Array::from(vec![
            Some(106.0),
            Some(-0.0),
            Some(0.5),
            Some(f64::NAN),
            None,
            Some(1e300),
            Some(1e16),
            Some(f64::INFINITY),
        ]));
        let want: Vec<Option<String>> = ["106", "0", "0.5"]
            .iter()
            .map(|s| Some(s.to_string()))
            .chain([None, None])
            .chain(
                ["1e300", "10000000000000000", "inf"]
                    .iter()
                    .map(|s| Some(s.to_string())),
            )
            .collect();
        assert_eq!(texts(floats), want);
        let ints = Arc::new(Int64Array::from(vec![Some(106), None]));
        assert_eq!(texts(ints), vec![Some("106".to_string()), None]);
        let small = Arc::new(Float32Array::from(vec![106.0f32, 0.1]));
        assert_eq!(
            texts(small),
            vec![Some("106".to_string()), Some("0.1".to_string())]
        );
    }
}
