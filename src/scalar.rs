//! Every scalar function (priors, readers, transforms, helpers) as one
//! `ScalarUDFImpl` parameterised by [`Op`]: the family is chosen from the
//! posterior struct's shape at planning time, and each call works on whole arrays.

use std::sync::Arc;

use datafusion::arrow::array::{
    Array, ArrayRef, AsArray, Float64Array, Int64Array, StringArray, StructArray,
};
use datafusion::arrow::compute::{can_cast_types, cast};
use datafusion::arrow::datatypes::{DataType, Field, Fields, Float64Type};
use datafusion::common::{exec_err, plan_err, DataFusionError, Result};
use datafusion::logical_expr::{
    ColumnarValue, Documentation, ScalarFunctionArgs, ScalarUDF, ScalarUDFImpl, Signature,
    Volatility,
};

use crate::docs::{arity_error, check_arity};
use crate::family::{
    number, rng, BetaPosterior, BetaPrior, DirichletPosterior, DirichletPrior, FamilyError,
    GammaPosterior, GammaPrior, Marginal, NigPosterior, NigPrior,
};
use crate::fit::family_error;
use crate::layout::{build, describe_type, AnyPosterior, Combine, Kind, PosteriorColumn};

/// What a posterior reader returns.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Reader {
    Mean,
    Var,
    Sd,
    Quantile,
    Interval,
    ProbAbove,
    Evidence,
    Draw,
}

impl Reader {
    /// Name of the reader's numeric parameter, if any.
    fn parameter(self) -> Option<&'static str> {
        match self {
            Reader::Quantile => Some("q"),
            Reader::Interval => Some("level"),
            Reader::ProbAbove => Some("t"),
            Reader::Draw => Some("seed"),
            _ => None,
        }
    }
}

/// The scalar operations.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Op {
    Prior(Kind),
    Read(Reader),
    Combine(Combine),
    Without,
    Scale,
    WithPrior,
    Under,
    FoldOf,
    DecayWeight,
    NormalizeKey,
    KeyText,
}

/// A scalar SQL function.
#[derive(Debug, PartialEq, Eq, Hash)]
pub struct ScalarFunction {
    name: &'static str,
    op: Op,
    signature: Signature,
    /// Earlier names still accepted.
    aliases: Vec<String>,
}

impl ScalarFunction {
    pub fn new(name: &'static str, op: Op) -> Self {
        ScalarFunction {
            name,
            op,
            signature: Signature::user_defined(Volatility::Immutable),
            aliases: Vec::new(),
        }
    }

    pub fn udf(name: &'static str, op: Op) -> ScalarUDF {
        ScalarUDF::new_from_impl(ScalarFunction::new(name, op))
    }

    /// `true` for the readers (posterior_mean, posterior_quantile, ...): one number
    /// per posterior, NULL for a NULL posterior.
    pub fn is_reader(&self) -> bool {
        matches!(self.op, Op::Read(_))
    }

    /// A function that also answers to an earlier name.
    pub fn udf_with_alias(name: &'static str, alias: &str, op: Op) -> ScalarUDF {
        let mut f = ScalarFunction::new(name, op);
        f.aliases.push(alias.to_string());
        ScalarUDF::new_from_impl(f)
    }
}

/// Every scalar function of the SQL surface.
pub fn all() -> Vec<ScalarUDF> {
    use Reader::*;
    vec![
        ScalarFunction::udf("beta_prior", Op::Prior(Kind::Beta)),
        ScalarFunction::udf("gamma_prior", Op::Prior(Kind::Gamma)),
        ScalarFunction::udf("nig_prior", Op::Prior(Kind::Nig)),
        ScalarFunction::udf("dirichlet_prior", Op::Prior(Kind::Dirichlet)),
        ScalarFunction::udf("posterior_mean", Op::Read(Mean)),
        ScalarFunction::udf("posterior_var", Op::Read(Var)),
        ScalarFunction::udf("posterior_sd", Op::Read(Sd)),
        ScalarFunction::udf("posterior_quantile", Op::Read(Quantile)),
        ScalarFunction::udf("posterior_interval", Op::Read(Interval)),
        ScalarFunction::udf("posterior_prob_above", Op::Read(ProbAbove)),
        ScalarFunction::udf_with_alias(
            "posterior_data_weight",
            "posterior_evidence",
            Op::Read(Evidence),
        ),
        ScalarFunction::udf("posterior_draw", Op::Read(Draw)),
        ScalarFunction::udf("posterior_merge", Op::Combine(Combine::Merge)),
        ScalarFunction::udf("posterior_subtract", Op::Combine(Combine::Subtract)),
        ScalarFunction::udf("posterior_without", Op::Without),
        ScalarFunction::udf("posterior_scale", Op::Scale),
        ScalarFunction::udf("posterior_with_prior", Op::WithPrior),
        ScalarFunction::udf("posterior_under", Op::Under),
        ScalarFunction::udf("fold_of", Op::FoldOf),
        ScalarFunction::udf("decay_weight", Op::DecayWeight),
        ScalarFunction::udf("normalize_key", Op::NormalizeKey),
        ScalarFunction::udf("key_text", Op::KeyText),
    ]
}

fn interval_type() -> DataType {
    DataType::Struct(Fields::from(vec![
        Field::new("lower", DataType::Float64, true),
        Field::new("upper", DataType::Float64, true),
    ]))
}

fn is_number(t: &DataType) -> bool {
    t.is_numeric() || matches!(t, DataType::Null | DataType::Boolean)
}

fn is_text(t: &DataType) -> bool {
    matches!(
        t,
        DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View | DataType::Null
    ) || matches!(t, DataType::Dictionary(_, v) if is_text(v))
}

impl ScalarFunction {
    fn number(&self, argument: &str, t: &DataType) -> Result<DataType> {
        if is_number(t) {
            Ok(DataType::Float64)
        } else {
            plan_err!(
                "{}: argument {argument} is {}; expected a number",
                self.name,
                describe_type(t)
            )
        }
    }

    /// A key argument as it is, when its values have a text form (`key_text`).
    fn text_form(&self, argument: &str, t: &DataType) -> Result<DataType> {
        if can_cast_types(t, &DataType::Utf8) {
            Ok(t.clone())
        } else {
            plan_err!(
                "{}: argument {argument} is {}, which has no text form; expected text, a \
                 number, a boolean, a date or a time",
                self.name,
                describe_type(t)
            )
        }
    }

    fn count(&self, n: usize, min: usize, max: usize) -> Result<()> {
        check_arity(self.name, n, min, max)
    }

    fn posterior(&self, argument: &str, t: &DataType) -> Result<Kind> {
        Kind::expect(self.name, argument, t)
    }
}

impl ScalarUDFImpl for ScalarFunction {
    fn name(&self) -> &str {
        self.name
    }

    fn aliases(&self) -> &[String] {
        &self.aliases
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn documentation(&self) -> Option<&Documentation> {
        crate::docs::get(self.name)
    }

    fn coerce_types(&self, t: &[DataType]) -> Result<Vec<DataType>> {
        let n = t.len();
        match self.op {
            Op::Prior(Kind::Beta) | Op::Prior(Kind::Gamma) => {
                self.count(n, 2, 2)?;
                let names = if self.op == Op::Prior(Kind::Beta) {
                    ["a", "b"]
                } else {
                    ["shape", "rate"]
                };
                Ok(vec![
                    self.number(names[0], &t[0])?,
                    self.number(names[1], &t[1])?,
                ])
            }
            Op::Prior(Kind::Nig) => {
                self.count(n, 4, 4)?;
                ["mu0", "kappa0", "alpha0", "beta0"]
                    .iter()
                    .zip(t)
                    .map(|(a, t)| self.number(a, t))
                    .collect()
            }
            Op::Prior(Kind::Dirichlet) => {
                self.count(n, 2, 2)?;
                let list =
                    |item: DataType| DataType::List(Arc::new(Field::new_list_field(item, true)));
                let classes = match &t[0] {
                    DataType::List(f) | DataType::LargeList(f) | DataType::FixedSizeList(f, _)
                        if is_text(f.data_type()) =>
                    {
                        list(DataType::Utf8)
                    }
                    other => {
                        return plan_err!(
                            "{}: argument classes is {}; expected a list of text such as ['attended', 'no_show']",
                            self.name,
                            describe_type(other)
                        )
                    }
                };
                let concentration = match &t[1] {
                    DataType::List(f) | DataType::LargeList(f) | DataType::FixedSizeList(f, _)
                        if is_number(f.data_type()) =>
                    {
                        list(DataType::Float64)
                    }
                    other if is_number(other) => DataType::Float64,
                    other => {
                        return plan_err!(
                        "{}: argument concentration is {}; expected a number or a list of numbers",
                        self.name,
                        describe_type(other)
                    )
                    }
                };
                Ok(vec![classes, concentration])
            }
            Op::Read(reader) => {
                if n == 0 {
                    return self.count(n, 1, 3).map(|_| vec![]);
                }
                let kind = self.posterior("p", &t[0])?;
                let class = kind == Kind::Dirichlet && reader != Reader::Evidence;
                let expected = 1 + usize::from(class) + usize::from(reader.parameter().is_some());
                if n != expected {
                    // The class argument depends on p's family: say which way it went.
                    let why = if class {
                        "a Dirichlet posterior is read per class, given right after p"
                    } else {
                        "a class is given for a Dirichlet posterior only, and p is not one"
                    };
                    return Err(arity_error(self.name, n, expected, expected, Some(why)));
                }
                let mut out = vec![t[0].clone()];
                if class {
                    if !is_text(&t[1]) {
                        return plan_err!(
                            "{}: argument class is {}; expected text",
                            self.name,
                            describe_type(&t[1])
                        );
                    }
                    out.push(DataType::Utf8);
                }
                if let Some(param) = reader.parameter() {
                    let ty = &t[out.len()];
                    if reader == Reader::Draw {
                        if !ty.is_integer() && !matches!(ty, DataType::Null) {
                            return plan_err!(
                                "{}: argument seed is {}; expected an integer",
                                self.name,
                                describe_type(ty)
                            );
                        }
                        out.push(DataType::Int64);
                    } else {
                        out.push(self.number(param, ty)?);
                    }
                }
                Ok(out)
            }
            Op::Combine(_) | Op::WithPrior => {
                self.count(n, 2, 2)?;
                let a = self.posterior("a", &t[0])?;
                let b = self.posterior(
                    if self.op == Op::WithPrior {
                        "prior"
                    } else {
                        "b"
                    },
                    &t[1],
                )?;
                if a != b {
                    return plan_err!(
                        "{}: cannot combine a {} posterior with a {} one",
                        self.name,
                        a.name(),
                        b.name()
                    );
                }
                Ok(t.to_vec())
            }
            Op::Without => {
                self.count(n, 2, 3)?;
                let kind = self.posterior("p", &t[0])?;
                let mut out = vec![t[0].clone()];
                if kind == Kind::Dirichlet {
                    if !is_text(&t[1]) {
                        return plan_err!(
                            "{}: argument observation is {}; expected a class (text)",
                            self.name,
                            describe_type(&t[1])
                        );
                    }
                    out.push(DataType::Utf8);
                } else {
                    out.push(self.number("observation", &t[1])?);
                }
                if n == 3 {
                    out.push(self.number("weight", &t[2])?);
                }
                Ok(out)
            }
            Op::Scale => {
                self.count(n, 2, 2)?;
                self.posterior("p", &t[0])?;
                Ok(vec![t[0].clone(), self.number("factor", &t[1])?])
            }
            Op::Under => {
                self.count(n, 4, 4)?;
                let kind = self.posterior("p", &t[0])?;
                // A NULL parent or own part is a posterior of p's family that is absent.
                for (argument, ty) in [("parent", &t[1]), ("own", &t[2])] {
                    if ty != &DataType::Null && self.posterior(argument, ty)? != kind {
                        return plan_err!(
                            "{}: argument {argument} is a {} posterior; p is a {} one",
                            self.name,
                            self.posterior(argument, ty)?.name(),
                            kind.name()
                        );
                    }
                }
                Ok(vec![
                    t[0].clone(),
                    t[0].clone(),
                    t[0].clone(),
                    self.number("strength", &t[3])?,
                ])
            }
            Op::FoldOf => {
                self.count(n, 1, 3)?;
                // Text keys are hashed in place; other types through their key text
                // (so the type reaches the function: a whole float hashes as its integer).
                let mut out = vec![self.text_form("key", &t[0])?];
                for (name, ty) in ["k", "seed"].iter().zip(&t[1..]) {
                    if !ty.is_integer() && !matches!(ty, DataType::Null) {
                        return plan_err!(
                            "{}: argument {name} is {}; expected an integer",
                            self.name,
                            describe_type(ty)
                        );
                    }
                    out.push(DataType::Int64);
                }
                Ok(out)
            }
            Op::NormalizeKey => {
                self.count(n, 1, 1)?;
                Ok(vec![DataType::Utf8])
            }
            Op::KeyText => {
                self.count(n, 1, 1)?;
                Ok(vec![self.text_form("value", &t[0])?])
            }
            Op::DecayWeight => {
                self.count(n, 2, 2)?;
                Ok(vec![
                    self.number("age", &t[0])?,
                    self.number("half_life", &t[1])?,
                ])
            }
        }
    }

    fn return_type(&self, t: &[DataType]) -> Result<DataType> {
        Ok(match self.op {
            Op::Prior(kind) => kind.data_type(),
            Op::Read(Reader::Interval) => interval_type(),
            Op::Read(_) | Op::DecayWeight => DataType::Float64,
            Op::FoldOf => DataType::Int64,
            Op::NormalizeKey => DataType::Utf8,
            Op::KeyText => DataType::Utf8,
            Op::Combine(_) | Op::Without | Op::Scale | Op::WithPrior | Op::Under => {
                self.posterior("p", &t[0])?.data_type()
            }
        })
    }

    fn invoke_with_args(&self, args: ScalarFunctionArgs) -> Result<ColumnarValue> {
        let arrays = ColumnarValue::values_to_arrays(&args.args)?;
        // Constant arguments give a constant (the engine's convention; it also lets a
        // fit recognise a prior that reached it unfolded, as through Python), whatever
        // the number of rows: one value.
        let constant = args
            .args
            .iter()
            .all(|a| matches!(a, ColumnarValue::Scalar(_)));
        let rows = if constant { 1 } else { args.number_rows };
        let out = match self.op {
            Op::Prior(kind) => self.priors(kind, &arrays, rows)?,
            Op::Read(reader) => self.read(reader, &arrays, rows)?,
            Op::Combine(_) | Op::Without | Op::Scale | Op::WithPrior => {
                self.transform(&arrays, rows)?
            }
            Op::Under => self.under(&arrays, rows)?,
            Op::FoldOf => self.fold_of(&arrays, rows)?,
            Op::DecayWeight => self.decay_weight(&arrays, rows)?,
            Op::KeyText => crate::key_text::key_text(&arrays[0], &DataType::Utf8)?,
            Op::NormalizeKey => {
                let text = arrays[0].as_string::<i32>();
                Arc::new(
                    text.iter()
                        .map(|t| t.map(crate::bundle::normalize_key))
                        .collect::<datafusion::arrow::array::StringArray>(),
                )
            }
        };
        // Constant arguments give a constant (the engine's convention; it also lets
        // a fit recognise a prior that reached it unfolded, as through Python).
        if out.len() == 1
            && args
                .args
                .iter()
                .all(|a| matches!(a, ColumnarValue::Scalar(_)))
        {
            return Ok(ColumnarValue::Scalar(
                datafusion::common::ScalarValue::try_from_array(&out, 0)?,
            ));
        }
        Ok(ColumnarValue::Array(out))
    }
}

fn floats(array: &ArrayRef) -> Result<Float64Array> {
    Ok(cast(array, &DataType::Float64)?
        .as_primitive::<Float64Type>()
        .clone())
}

fn ints(array: &ArrayRef) -> Result<Int64Array> {
    Ok(cast(array, &DataType::Int64)?.as_primitive().clone())
}

fn texts(array: &ArrayRef) -> Result<StringArray> {
    Ok(cast(array, &DataType::Utf8)?.as_string::<i32>().clone())
}

/// Optional value of row `i`.
fn at<T: Array + 'static>(a: &T, i: usize, get: impl Fn(&T, usize) -> f64) -> Option<f64> {
    a.is_valid(i).then(|| get(a, i))
}

impl ScalarFunction {
    fn err(&self, e: FamilyError) -> DataFusionError {
        family_error(self.name, e)
    }

    fn priors(&self, kind: Kind, args: &[ArrayRef], rows: usize) -> Result<ArrayRef> {
        let mut out = Vec::with_capacity(rows);
        if kind == Kind::Dirichlet {
            let classes = args[0].as_list::<i32>();
            let conc = &args[1];
            for i in 0..rows {
                if classes.is_null(i) || conc.is_null(i) {
                    out.push(None);
                    continue;
                }
                let names = classes.value(i);
                let names = names.as_string::<i32>();
                if names.null_count() > 0 {
                    return exec_err!(
                        "{}: argument classes contains NULL; give class names",
                        self.name
                    );
                }
                let names: Vec<String> = names
                    .iter()
                    .map(|s| s.unwrap_or_default().to_string())
                    .collect();
                let alpha: Vec<f64> = match conc.data_type() {
                    DataType::List(_) => {
                        let v = conc.as_list::<i32>().value(i);
                        v.as_primitive::<Float64Type>()
                            .iter()
                            .map(|x| x.unwrap_or(f64::NAN))
                            .collect()
                    }
                    _ => vec![conc.as_primitive::<Float64Type>().value(i); names.len()],
                };
                let prior = DirichletPrior::new(names, alpha).map_err(|e| self.err(e))?;
                out.push(Some(AnyPosterior::Dirichlet(DirichletPosterior::new(
                    prior,
                ))));
            }
            return build(self.name, kind, &out);
        }
        let cols = args.iter().map(floats).collect::<Result<Vec<_>>>()?;
        for i in 0..rows {
            if cols.iter().any(|c| c.is_null(i)) {
                out.push(None);
                continue;
            }
            let v = |k: usize| cols[k].value(i);
            let p =
                match kind {
                    Kind::Beta => BetaPrior::new(v(0), v(1))
                        .map(|p| AnyPosterior::Beta(BetaPosterior::new(p))),
                    Kind::Gamma => GammaPrior::new(v(0), v(1))
                        .map(|p| AnyPosterior::Gamma(GammaPosterior::new(p))),
                    _ => NigPrior::new(v(0), v(1), v(2), v(3))
                        .map(|p| AnyPosterior::Nig(NigPosterior::new(p))),
                }
                .map_err(|e| self.err(e))?;
            out.push(Some(p));
        }
        build(self.name, kind, &out)
    }

    fn read(&self, reader: Reader, args: &[ArrayRef], rows: usize) -> Result<ArrayRef> {
        let column = PosteriorColumn::new(self.name, &args[0])?;
        if let Some(out) = fast_moments(reader, &column) {
            return Ok(out);
        }
        let has_class = column.kind() == Kind::Dirichlet && reader != Reader::Evidence;
        let class = if has_class {
            Some(texts(&args[1])?)
        } else {
            None
        };
        let param_index = 1 + usize::from(has_class);
        let param = match reader {
            Reader::Quantile | Reader::Interval | Reader::ProbAbove => {
                Some(floats(&args[param_index])?)
            }
            _ => None,
        };
        let seed = if reader == Reader::Draw {
            Some(ints(&args[param_index])?)
        } else {
            None
        };
        let mut lower = Vec::with_capacity(rows);
        let mut upper = Vec::with_capacity(if reader == Reader::Interval { rows } else { 0 });
        for i in 0..rows {
            let Some(p) = column.get(i).map_err(|e| self.err(e))? else {
                lower.push(None);
                upper.push(None);
                continue;
            };
            if reader == Reader::Evidence {
                lower.push(Some(p.evidence()));
                continue;
            }
            let class_value = match &class {
                Some(c) if c.is_null(i) => {
                    lower.push(None);
                    upper.push(None);
                    continue;
                }
                Some(c) => Some(c.value(i)),
                None => None,
            };
            let m = p.marginal(class_value).map_err(|e| self.err(e))?;
            let x = param.as_ref().and_then(|a| at(a, i, |a, i| a.value(i)));
            if param.is_some() && x.is_none() || seed.as_ref().is_some_and(|s| s.is_null(i)) {
                lower.push(None);
                upper.push(None);
                continue;
            }
            let value = match reader {
                Reader::Mean => m.mean(),
                Reader::Var => m.var(),
                Reader::Sd => m.sd(),
                Reader::Quantile => m.quantile(self.probability("q", x.unwrap_or_default())?),
                Reader::Interval => {
                    let level = self.probability("level", x.unwrap_or_default())?;
                    let tail = 0.5 * (1.0 - level);
                    upper.push(Some(m.quantile(1.0 - tail)));
                    m.quantile(tail)
                }
                Reader::ProbAbove => {
                    let t = x.unwrap_or_default();
                    if t.is_nan() {
                        return exec_err!(
                            "{}: argument t is NaN; give a finite threshold",
                            self.name
                        );
                    }
                    m.prob_above(t)
                }
                Reader::Draw => {
                    let seed = seed.as_ref().map_or(0, |s| s.value(i));
                    m.quantile(rng::uniform(seed as u64, &marginal_salt(&m)))
                }
                Reader::Evidence => unreachable!("handled above"),
            };
            let upper_value = upper
                .last()
                .copied()
                .flatten()
                .filter(|_| reader == Reader::Interval);
            if !value.is_finite() || upper_value.is_some_and(|u| !u.is_finite()) {
                let infinite_variance = matches!(m, Marginal::StudentT { dof, .. } if dof <= 2.0);
                if matches!(reader, Reader::Var | Reader::Sd) && infinite_variance {
                    // A Student-t with at most 2 degrees of freedom has no finite
                    // variance: NULL, as documented, never inf.
                    lower.push(None);
                    continue;
                }
                return exec_err!(
                    "{}: the result is not a finite number for this posterior, whose \
                     marginal is {m}; its parameters are too extreme for this reader",
                    self.name
                );
            }
            lower.push(Some(value));
        }
        if reader == Reader::Interval {
            let DataType::Struct(fields) = interval_type() else {
                unreachable!()
            };
            let nulls: Vec<bool> = lower.iter().map(Option::is_some).collect();
            return Ok(Arc::new(StructArray::try_new(
                fields,
                vec![
                    Arc::new(Float64Array::from(lower)) as ArrayRef,
                    Arc::new(Float64Array::from(upper)),
                ],
                Some(nulls.into()),
            )?));
        }
        Ok(Arc::new(Float64Array::from(lower)))
    }

    fn probability(&self, name: &'static str, x: f64) -> Result<f64> {
        if x > 0.0 && x < 1.0 {
            Ok(x)
        } else {
            Err(self.err(FamilyError::InvalidParameter {
                name,
                value: x,
                allowed: "a number strictly between 0 and 1",
            }))
        }
    }

    /// `posterior_under(p, parent, own, strength)`: see `AnyPosterior::under`. A NULL
    /// parent leaves p as it is; a NULL own part removes nothing.
    fn under(&self, args: &[ArrayRef], rows: usize) -> Result<ArrayRef> {
        let p = PosteriorColumn::new(self.name, &args[0])?;
        let parent = PosteriorColumn::new(self.name, &args[1])?;
        let own = PosteriorColumn::new(self.name, &args[2])?;
        let strength = floats(&args[3])?;
        let mut out = Vec::with_capacity(rows);
        for i in 0..rows {
            let get = |c: &PosteriorColumn| c.get(i).map_err(|e| self.err(e));
            let (Some(p), Some(s)) = (get(&p)?, at(&strength, i, |f, i| f.value(i))) else {
                out.push(None);
                continue;
            };
            out.push(Some(match get(&parent)? {
                Some(parent) => p
                    .under(&parent, get(&own)?.as_ref(), s)
                    .map_err(|e| self.err(e))?,
                None => p,
            }));
        }
        build(self.name, p.kind(), &out)
    }

    fn transform(&self, args: &[ArrayRef], rows: usize) -> Result<ArrayRef> {
        let a = PosteriorColumn::new(self.name, &args[0])?;
        let kind = a.kind();
        let b = match self.op {
            Op::Combine(_) | Op::WithPrior => Some(PosteriorColumn::new(self.name, &args[1])?),
            _ => None,
        };
        let number = match self.op {
            Op::Scale => Some(floats(&args[1])?),
            Op::Without if kind != Kind::Dirichlet => Some(floats(&args[1])?),
            _ => None,
        };
        let class = if self.op == Op::Without && kind == Kind::Dirichlet {
            Some(texts(&args[1])?)
        } else {
            None
        };
        let weight = if self.op == Op::Without && args.len() > 2 {
            Some(floats(&args[2])?)
        } else {
            None
        };
        let mut out = Vec::with_capacity(rows);
        for i in 0..rows {
            let left = a.get(i).map_err(|e| self.err(e))?;
            let right = match &b {
                Some(b) => b.get(i).map_err(|e| self.err(e))?,
                None => None,
            };
            let result = match (self.op, left) {
                (Op::Combine(Combine::Merge), None) => right,
                (_, None) => None,
                (Op::Combine(op), Some(l)) => match right {
                    Some(r) => Some(l.combine(&r, op).map_err(|e| self.err(e))?),
                    None => Some(l),
                },
                (Op::WithPrior, Some(l)) => match right {
                    Some(r) => Some(l.with_prior(&r).map_err(|e| self.err(e))?),
                    None => None,
                },
                (Op::Scale, Some(l)) => {
                    match number.as_ref().and_then(|f| at(f, i, |f, i| f.value(i))) {
                        Some(f) => Some(l.scale(f).map_err(|e| self.err(e))?),
                        None => None,
                    }
                }
                (Op::Without, Some(l)) => {
                    let w = match &weight {
                        Some(w) if w.is_null(i) => {
                            out.push(None);
                            continue;
                        }
                        Some(w) => w.value(i),
                        None => 1.0,
                    };
                    self.without(&l, number.as_ref(), class.as_ref(), i, w)?
                }
                _ => unreachable!("only transforms reach here"),
            };
            out.push(result);
        }
        build(self.name, kind, &out)
    }

    fn without(
        &self,
        p: &AnyPosterior,
        number: Option<&Float64Array>,
        class: Option<&StringArray>,
        i: usize,
        w: f64,
    ) -> Result<Option<AnyPosterior>> {
        if number.is_some_and(|n| n.is_null(i)) || class.is_some_and(|c| c.is_null(i)) {
            return Ok(None);
        }
        let x = number.map_or(0.0, |n| n.value(i));
        let r = match p {
            AnyPosterior::Beta(b) => b.without(x, w).map(AnyPosterior::Beta),
            AnyPosterior::Gamma(g) => g.without(x, w).map(AnyPosterior::Gamma),
            AnyPosterior::Nig(n) => n.without(x, w).map(AnyPosterior::Nig),
            AnyPosterior::Dirichlet(d) => d
                .without(class.map_or("", |c| c.value(i)), w)
                .map(AnyPosterior::Dirichlet),
        };
        Ok(Some(r.map_err(|e| self.err(e))?))
    }

    fn fold_of(&self, args: &[ArrayRef], rows: usize) -> Result<ArrayRef> {
        let key = &args[0];
        match key.data_type() {
            DataType::Utf8View => self.folds(key.as_string_view().iter(), args, rows),
            DataType::LargeUtf8 => self.folds(key.as_string::<i64>().iter(), args, rows),
            DataType::Utf8 => self.folds(key.as_string::<i32>().iter(), args, rows),
            _ => {
                // Any other type through its key text, so 123, 123.0 and '123' share a fold.
                let text = crate::key_text::key_text(key, &DataType::Utf8View)?;
                self.folds(text.as_string_view().iter(), args, rows)
            }
        }
    }

    fn folds<'a>(
        &self,
        keys: impl Iterator<Item = Option<&'a str>>,
        args: &[ArrayRef],
        rows: usize,
    ) -> Result<ArrayRef> {
        let k = if args.len() > 1 {
            Some(ints(&args[1])?)
        } else {
            None
        };
        let seed = if args.len() > 2 {
            Some(ints(&args[2])?)
        } else {
            None
        };
        let mut out = Vec::with_capacity(rows);
        for (i, key) in keys.enumerate().take(rows) {
            let Some(key) = key else {
                out.push(None);
                continue;
            };
            if k.as_ref().is_some_and(|k| k.is_null(i))
                || seed.as_ref().is_some_and(|s| s.is_null(i))
            {
                out.push(None);
                continue;
            }
            let folds = k.as_ref().map_or(5, |k| k.value(i));
            if folds < 2 {
                return exec_err!(
                    "{}: argument k = {folds} is out of range; allowed: an integer >= 2",
                    self.name
                );
            }
            let s = seed.as_ref().map_or(0, |s| s.value(i));
            out.push(Some(
                rng::fold(key.as_bytes(), folds as u64, s as u64) as i64
            ));
        }
        Ok(Arc::new(Int64Array::from(out)))
    }

    fn decay_weight(&self, args: &[ArrayRef], rows: usize) -> Result<ArrayRef> {
        let age = floats(&args[0])?;
        let half = floats(&args[1])?;
        let mut out = Vec::with_capacity(rows);
        for i in 0..rows {
            if age.is_null(i) || half.is_null(i) {
                out.push(None);
                continue;
            }
            let (a, h) = (age.value(i), half.value(i));
            if !(a.is_finite() && a >= 0.0) {
                return exec_err!(
                    "{}: argument age = {} is out of range; allowed: a finite number >= 0",
                    self.name,
                    number(a)
                );
            }
            if !(h.is_finite() && h > 0.0) {
                return exec_err!(
                    "{}: argument half_life = {} is out of range; allowed: a finite number > 0",
                    self.name,
                    number(h)
                );
            }
            out.push(Some((-a / h).exp2()));
        }
        Ok(Arc::new(Float64Array::from(out)))
    }
}

/// Mean, variance, sd and evidence of Beta, Gamma and NIG columns in one tight loop
/// over the field arrays. Returns None (the general path then runs and reports the
/// exact error) when any row holds values that are not a valid posterior.
#[allow(clippy::needless_range_loop)] // row i indexes several parallel field arrays
fn fast_moments(reader: Reader, column: &PosteriorColumn) -> Option<ArrayRef> {
    if !matches!(
        reader,
        Reader::Mean | Reader::Var | Reader::Sd | Reader::Evidence
    ) {
        return None;
    }
    let (fields, struct_nulls) = column.float_fields()?;
    let rows = column.len();
    let v: Vec<&[f64]> = fields.iter().map(|f| f.values().as_ref()).collect();
    // NULL where the struct or any of its fields is NULL; such rows are not checked.
    let mut nulls = struct_nulls.cloned();
    for f in fields {
        nulls = datafusion::arrow::buffer::NullBuffer::union(nulls.as_ref(), f.nulls());
    }
    let mut out = Vec::with_capacity(rows);
    let mut bad = false;
    let kind = column.kind();
    for i in 0..rows {
        let x = |k: usize| v[k][i];
        let checked = nulls.as_ref().is_none_or(|n| n.is_valid(i));
        let value = match kind {
            Kind::Beta => {
                let (a0, b0, s, n) = (x(0), x(1), x(2), x(3));
                bad |= checked
                    && !(a0 > 0.0
                        && b0 > 0.0
                        && a0.is_finite()
                        && b0.is_finite()
                        && s >= 0.0
                        && n >= s
                        && n.is_finite());
                let (a, b) = (a0 + s, b0 + (n - s));
                let t = a + b;
                match reader {
                    Reader::Mean => a / t,
                    Reader::Var => (a / t) * (b / t) / (t + 1.0),
                    Reader::Sd => ((a / t) * (b / t) / (t + 1.0)).sqrt(),
                    _ => n,
                }
            }
            Kind::Gamma => {
                let (k0, r0, e, t) = (x(0), x(1), x(2), x(3));
                bad |= checked
                    && !(k0 > 0.0
                        && r0 > 0.0
                        && k0.is_finite()
                        && r0.is_finite()
                        && e >= 0.0
                        && t >= 0.0
                        && e.is_finite()
                        && t.is_finite());
                let (k, r) = (k0 + e, r0 + t);
                match reader {
                    Reader::Mean => k / r,
                    Reader::Var => k / (r * r),
                    Reader::Sd => k.sqrt() / r,
                    _ => t,
                }
            }
            _ => return None, // NIG: the general path (Student-t moments) is already cheap enough
        };
        // A result that overflowed: the general path reports it.
        bad |= checked && !value.is_finite();
        out.push(value);
    }
    if bad {
        return None;
    }
    Some(Arc::new(Float64Array::new(out.into(), nulls)))
}

/// Parameters that make a draw's uniform number specific to the posterior.
fn marginal_salt(m: &Marginal) -> [f64; 3] {
    match *m {
        Marginal::Beta { a, b } => [a, b, 0.0],
        Marginal::Gamma { shape, rate } => [shape, rate, 1.0],
        Marginal::StudentT { loc, scale, dof } => [loc, scale, dof],
    }
}
