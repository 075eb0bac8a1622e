//! `fit_prior(p)` and `fit_prior_report(p)`: empirical-Bayes priors fitted from
//! one posterior per level (see `family::empirical` for the estimators);
//! `fit_strength(p, parent, own)`: the strength of child levels' priors centred on
//! their parents' posteriors.

use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, AsArray, ListArray};
use datafusion::arrow::buffer::OffsetBuffer;
use datafusion::arrow::datatypes::{DataType, Field, FieldRef};
use datafusion::common::{plan_err, Result, ScalarValue};
use datafusion::logical_expr::function::{AccumulatorArgs, StateFieldsArgs};
use datafusion::logical_expr::{
    Accumulator, AggregateUDFImpl, Documentation, Signature, Volatility,
};
use serde_json::json;

use crate::docs::check_arity;
use crate::family::empirical::{fit_beta, fit_dirichlet, fit_gamma, fit_nig, FitReport};
use crate::family::{
    BetaPosterior, Conjugate, DirichletPosterior, FamilyError, GammaPosterior, NigPosterior,
};
use crate::fit::family_error;
use crate::layout::{build, AnyPosterior, Kind, PosteriorColumn};

#[derive(Debug, PartialEq, Eq, Hash)]
pub struct FitPrior {
    signature: Signature,
    report: bool,
}

impl FitPrior {
    pub fn new(report: bool) -> Self {
        FitPrior {
            signature: Signature::user_defined(Volatility::Immutable),
            report,
        }
    }

    fn function(&self) -> &'static str {
        if self.report {
            "fit_prior_report"
        } else {
            "fit_prior"
        }
    }
}

impl AggregateUDFImpl for FitPrior {
    fn name(&self) -> &str {
        self.function()
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn coerce_types(&self, t: &[DataType]) -> Result<Vec<DataType>> {
        if t.len() != 1 {
            return plan_err!(
                "{}: takes 1 argument, got {}; usage: {}(p)",
                self.function(),
                t.len(),
                self.function()
            );
        }
        Ok(vec![Kind::expect(self.function(), "p", &t[0])?.data_type()])
    }

    fn return_type(&self, t: &[DataType]) -> Result<DataType> {
        let kind = Kind::expect(self.function(), "p", &t[0])?;
        Ok(if self.report {
            DataType::Utf8
        } else {
            kind.data_type()
        })
    }

    fn accumulator(&self, args: AccumulatorArgs) -> Result<Box<dyn Accumulator>> {
        crate::distinct::refuse(self.function(), args.is_distinct)?;
        let kind = Kind::expect(self.function(), "p", args.expr_fields[0].data_type())?;
        Ok(Box::new(FitPriorAccumulator {
            function: self.function(),
            kind,
            report: self.report,
            levels: Vec::new(),
        }))
    }

    fn state_fields(&self, args: StateFieldsArgs) -> Result<Vec<FieldRef>> {
        let kind = Kind::expect(self.function(), "p", args.input_fields[0].data_type())?;
        Ok(vec![Arc::new(Field::new(
            format!("{}[levels]", args.name),
            DataType::List(Arc::new(Field::new_list_field(kind.data_type(), true))),
            true,
        ))])
    }

    fn documentation(&self) -> Option<&Documentation> {
        crate::docs::get(self.function())
    }
}

#[derive(Debug)]
struct FitPriorAccumulator {
    function: &'static str,
    kind: Kind,
    report: bool,
    levels: Vec<AnyPosterior>,
}

impl FitPriorAccumulator {
    fn add(&mut self, column: &ArrayRef) -> Result<()> {
        let column = PosteriorColumn::new(self.function, column)?;
        for i in 0..column.len() {
            if let Some(p) = column.get(i).map_err(|e| family_error(self.function, e))? {
                self.levels.push(p);
            }
        }
        Ok(())
    }

    /// The fitted prior (as a zero-evidence posterior) and the report. Levels are
    /// sorted first, so the result does not depend on how rows were partitioned.
    fn fit(&mut self) -> std::result::Result<(AnyPosterior, FitReport), FamilyError> {
        self.levels.sort_by_cached_key(sort_key);
        let (prior, mut report) = match self.kind {
            Kind::Beta => {
                let data: Vec<(f64, f64)> = self
                    .levels
                    .iter()
                    .filter_map(|p| match p {
                        AnyPosterior::Beta(b) => Some((b.successes, b.trials)),
                        _ => None,
                    })
                    .collect();
                let (prior, report) = fit_beta(&data)?;
                (AnyPosterior::Beta(BetaPosterior::new(prior)), report)
            }
            Kind::Gamma => {
                let data: Vec<(f64, f64)> = self
                    .levels
                    .iter()
                    .filter_map(|p| match p {
                        AnyPosterior::Gamma(g) => Some((g.events, g.exposure)),
                        _ => None,
                    })
                    .collect();
                let (prior, report) = fit_gamma(&data)?;
                (AnyPosterior::Gamma(GammaPosterior::new(prior)), report)
            }
            Kind::Nig => {
                let data: Vec<_> = self
                    .levels
                    .iter()
                    .filter_map(|p| match p {
                        AnyPosterior::Nig(n) => Some(n.stats),
                        _ => None,
                    })
                    .collect();
                let (prior, report) = fit_nig(&data)?;
                (AnyPosterior::Nig(NigPosterior::new(prior)), report)
            }
            Kind::Dirichlet => {
                let mut classes: Option<Vec<String>> = None;
                let mut counts = Vec::new();
                for p in &self.levels {
                    if let AnyPosterior::Dirichlet(d) = p {
                        match &classes {
                            None => classes = Some(d.prior.classes.clone()),
                            Some(c) if *c != d.prior.classes => {
                                return Err(FamilyError::InvalidClasses(format!(
                                    "levels have different class lists [{}] and [{}]",
                                    c.join(", "),
                                    d.prior.classes.join(", ")
                                )))
                            }
                            _ => {}
                        }
                        counts.push(d.counts.clone());
                    }
                }
                let classes = classes.unwrap_or_default();
                let (prior, report) = fit_dirichlet(&classes, &counts)?;
                (
                    AnyPosterior::Dirichlet(DirichletPosterior::new(prior)),
                    report,
                )
            }
        };
        // One convention for every family: the sum of the levels' log marginal likelihoods.
        report.log_marginal_likelihood = self
            .levels
            .iter()
            .filter(|p| p.evidence() > 0.0)
            .map(|p| p.with_prior(&prior).map(|q| lml(&q)))
            .sum::<std::result::Result<f64, _>>()?;
        Ok((prior, report))
    }
}

/// A total order on posteriors: their evidence fields' bit patterns.
fn sort_key(p: &AnyPosterior) -> Vec<u64> {
    match p {
        AnyPosterior::Beta(b) => vec![b.successes.to_bits(), b.trials.to_bits()],
        AnyPosterior::Gamma(g) => vec![g.events.to_bits(), g.exposure.to_bits()],
        AnyPosterior::Nig(n) => vec![
            n.stats.n.to_bits(),
            n.stats.mean.to_bits(),
            n.stats.m2.to_bits(),
        ],
        AnyPosterior::Dirichlet(d) => d.counts.iter().map(|c| c.to_bits()).collect(),
    }
}

fn lml(p: &AnyPosterior) -> f64 {
    match p {
        AnyPosterior::Beta(b) => b.log_marginal_likelihood(),
        AnyPosterior::Gamma(g) => g.log_marginal_likelihood(),
        AnyPosterior::Nig(n) => n.log_marginal_likelihood(),
        AnyPosterior::Dirichlet(d) => d.log_marginal_likelihood(),
    }
}

/// The JSON report of a fit.
pub fn report_json(prior: &AnyPosterior, report: &FitReport) -> String {
    let parameters = match prior {
        AnyPosterior::Beta(b) => json!({"a0": b.prior.a0, "b0": b.prior.b0}),
        AnyPosterior::Gamma(g) => json!({"shape0": g.prior.shape0, "rate0": g.prior.rate0}),
        AnyPosterior::Nig(n) => {
            json!({"mu0": n.prior.mu0, "kappa0": n.prior.kappa0, "alpha0": n.prior.alpha0, "beta0": n.prior.beta0})
        }
        AnyPosterior::Dirichlet(d) => json!({"classes": d.prior.classes, "a0": d.prior.alpha0}),
    };
    json!({
        "family": prior.kind().name(),
        "prior": parameters,
        "log_marginal_likelihood": report.log_marginal_likelihood,
        "iterations": report.iterations,
        "converged": report.converged,
        "strength": report.strength,
        "at_bound": report.at_bound,
        "levels": report.levels,
        "method": report.method,
        "unfitted": report.unfitted,
    })
    .to_string()
}

impl Accumulator for FitPriorAccumulator {
    fn update_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        self.add(&values[0])
    }

    fn evaluate(&mut self) -> Result<ScalarValue> {
        let (prior, report) = self.fit().map_err(|e| family_error(self.function, e))?;
        if self.report {
            return Ok(ScalarValue::Utf8(Some(report_json(&prior, &report))));
        }
        ScalarValue::try_from_array(&build(self.function, self.kind, &[Some(prior)])?, 0)
    }

    fn size(&self) -> usize {
        std::mem::size_of_val(self) + self.levels.capacity() * std::mem::size_of::<AnyPosterior>()
    }

    fn state(&mut self) -> Result<Vec<ScalarValue>> {
        let rows: Vec<Option<AnyPosterior>> = self.levels.iter().cloned().map(Some).collect();
        let values = build(self.function, self.kind, &rows)?;
        let field = Arc::new(Field::new_list_field(self.kind.data_type(), true));
        let list = ListArray::try_new(
            field,
            OffsetBuffer::from_lengths([rows.len()]),
            values,
            None,
        )?;
        Ok(vec![ScalarValue::List(Arc::new(list))])
    }

    fn merge_batch(&mut self, states: &[ArrayRef]) -> Result<()> {
        let lists = states[0].as_list::<i32>();
        for i in 0..lists.len() {
            if lists.is_valid(i) {
                self.add(&lists.value(i))?;
            }
        }
        Ok(())
    }
}

/// `fit_strength(p, parent, own)`: the strength of child levels' priors centred on
/// their parents (`AnyPosterior::under`), by maximum marginal likelihood.
#[derive(Debug, PartialEq, Eq, Hash)]
pub struct FitStrength {
    signature: Signature,
}

impl Default for FitStrength {
    fn default() -> Self {
        FitStrength {
            signature: Signature::user_defined(Volatility::Immutable),
        }
    }
}

const FIT_STRENGTH: &str = "fit_strength";

impl AggregateUDFImpl for FitStrength {
    fn name(&self) -> &str {
        FIT_STRENGTH
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn coerce_types(&self, t: &[DataType]) -> Result<Vec<DataType>> {
        check_arity(FIT_STRENGTH, t.len(), 3, 3)?;
        let kind = Kind::expect(FIT_STRENGTH, "p", &t[0])?;
        for (argument, ty) in [("parent", &t[1]), ("own", &t[2])] {
            if ty != &DataType::Null && Kind::expect(FIT_STRENGTH, argument, ty)? != kind {
                return plan_err!(
                    "{FIT_STRENGTH}: argument {argument} is not a {} posterior like p",
                    kind.name()
                );
            }
        }
        Ok(vec![kind.data_type(); 3])
    }

    fn return_type(&self, _: &[DataType]) -> Result<DataType> {
        Ok(DataType::Float64)
    }

    fn accumulator(&self, args: AccumulatorArgs) -> Result<Box<dyn Accumulator>> {
        crate::distinct::refuse(FIT_STRENGTH, args.is_distinct)?;
        let kind = Kind::expect(FIT_STRENGTH, "p", args.expr_fields[0].data_type())?;
        Ok(Box::new(FitStrengthAccumulator {
            kind,
            levels: Vec::new(),
        }))
    }

    fn state_fields(&self, args: StateFieldsArgs) -> Result<Vec<FieldRef>> {
        let kind = Kind::expect(FIT_STRENGTH, "p", args.input_fields[0].data_type())?;
        Ok(["p", "parent", "own"]
            .iter()
            .map(|part| {
                Arc::new(Field::new(
                    format!("{}[{part}]", args.name),
                    DataType::List(Arc::new(Field::new_list_field(kind.data_type(), true))),
                    true,
                ))
            })
            .collect())
    }

    fn documentation(&self) -> Option<&Documentation> {
        crate::docs::get(FIT_STRENGTH)
    }
}

/// A child level: its posterior, its parent's, and its own evidence in the parent.
type Child = (AnyPosterior, AnyPosterior, Option<AnyPosterior>);

#[derive(Debug)]
struct FitStrengthAccumulator {
    kind: Kind,
    levels: Vec<Child>,
}

impl FitStrengthAccumulator {
    fn add(&mut self, columns: &[ArrayRef]) -> Result<()> {
        let [p, parent, own] = [0, 1, 2].map(|i| PosteriorColumn::new(FIT_STRENGTH, &columns[i]));
        let (p, parent, own) = (p?, parent?, own?);
        let get = |c: &PosteriorColumn, i| c.get(i).map_err(|e| family_error(FIT_STRENGTH, e));
        for i in 0..p.len() {
            if let (Some(child), Some(up)) = (get(&p, i)?, get(&parent, i)?) {
                self.levels.push((child, up, get(&own, i)?));
            }
        }
        Ok(())
    }

    /// The sum of the children's log marginal likelihoods with strength `s`.
    fn log_likelihood(&self, s: f64) -> std::result::Result<f64, FamilyError> {
        self.levels
            .iter()
            .map(|(p, parent, own)| p.under(parent, own.as_ref(), s).map(|q| lml(&q)))
            .sum()
    }
}

impl Accumulator for FitStrengthAccumulator {
    fn update_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        self.add(values)
    }

    fn evaluate(&mut self) -> Result<ScalarValue> {
        if self.levels.is_empty() {
            return Ok(ScalarValue::Float64(None));
        }
        // Sorted, so the sum (and the fit) does not depend on row order.
        self.levels.sort_by_cached_key(|(p, parent, own)| {
            (sort_key(p), sort_key(parent), own.as_ref().map(sort_key))
        });
        let (s, _) = crate::family::empirical::fit_log_scale(|s| self.log_likelihood(s))
            .map_err(|e| family_error(FIT_STRENGTH, e))?;
        Ok(ScalarValue::Float64(Some(s)))
    }

    fn size(&self) -> usize {
        std::mem::size_of_val(self) + self.levels.capacity() * std::mem::size_of::<Child>()
    }

    fn state(&mut self) -> Result<Vec<ScalarValue>> {
        let parts: [Vec<Option<AnyPosterior>>; 3] = [
            self.levels.iter().map(|l| Some(l.0.clone())).collect(),
            self.levels.iter().map(|l| Some(l.1.clone())).collect(),
            self.levels.iter().map(|l| l.2.clone()).collect(),
        ];
        let field = Arc::new(Field::new_list_field(self.kind.data_type(), true));
        parts
            .iter()
            .map(|rows| {
                let list = ListArray::try_new(
                    field.clone(),
                    OffsetBuffer::from_lengths([rows.len()]),
                    build(FIT_STRENGTH, self.kind, rows)?,
                    None,
                )?;
                Ok(ScalarValue::List(Arc::new(list)))
            })
            .collect()
    }

    fn merge_batch(&mut self, states: &[ArrayRef]) -> Result<()> {
        let lists: Vec<_> = states.iter().map(|s| s.as_list::<i32>()).collect();
        for i in 0..lists[0].len() {
            if lists[0].is_valid(i) {
                let parts: Vec<ArrayRef> = lists.iter().map(|l| l.value(i)).collect();
                self.add(&parts)?;
            }
        }
        Ok(())
    }
}
