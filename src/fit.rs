//! The fit aggregates: one generic adapter (`FitAggregate<K>`) turns a small
//! per-family kernel into a DataFusion aggregate with a vectorised
//! `GroupsAccumulator`, a retractable `Accumulator` for window frames, and a
//! documented signature.
//!
//! Each group keeps its statistics in one flat vector of f64 slots, two per
//! statistic: a compensated (double-double) sum, so that the result does not
//! depend on the order in which rows and partial states arrive (thread count,
//! partitioning; see [`crate::family::compensated`]). The prior is a
//! planning-time constant held by the kernel, so nothing per group is boxed.

use std::collections::HashMap;
use std::fmt::Debug;
use std::hash::Hash;
use std::sync::Arc;

use datafusion::arrow::array::{
    make_view, Array, ArrayRef, AsArray, BooleanArray, Float64Array, ListArray, StringViewArray,
};
use datafusion::arrow::buffer::OffsetBuffer;
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Field, FieldRef, Float64Type, Int32Type, Int64Type};
use datafusion::common::{exec_err, plan_err, DataFusionError, Result, ScalarValue};
use datafusion::logical_expr::function::{AccumulatorArgs, StateFieldsArgs};
use datafusion::logical_expr::{
    Accumulator, AggregateUDF, AggregateUDFImpl, Documentation, EmitTo, GroupsAccumulator,
    Signature, Volatility,
};
use datafusion::physical_expr::expressions::Literal;

use crate::docs::check_arity;
use crate::family::compensated::Dd;
use crate::family::nig::{centred_terms, stats_from_centred};
use crate::family::{
    beta::check_outcome, BetaPosterior, BetaPrior, DirichletPosterior, DirichletPrior, FamilyError,
    GammaPosterior, GammaPrior, NigPrior,
};
use crate::layout::{build, build_floats, describe_type, AnyPosterior, Kind, PosteriorColumn};

/// Wrap a family error with the function's name.
pub fn family_error(function: &str, e: FamilyError) -> DataFusionError {
    DataFusionError::Execution(format!("{function}: {e}"))
}

/// How a kernel's partial state travels between partitions.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StateLayout {
    /// A fixed set of statistics: one Float64 column per `[hi, lo]` half, named
    /// `<stat>` and `<stat>.lo`.
    Columns(&'static [&'static str]),
    /// As many statistics as the prior says (Dirichlet classes): one list column.
    List(&'static str),
}

/// What a family contributes to a fit aggregate.
pub trait FitKernel: Debug + Clone + Send + Sync + 'static {
    /// The SQL function name.
    const NAME: &'static str;
    /// Family of the result.
    const KIND: Kind;
    /// The partial state's layout.
    const STATE: StateLayout;
    /// Index of the prior among the arguments, if the function takes one.
    const PRIOR_ARG: usize;
    /// Build from the prior (or the default when `None`).
    fn new(prior: Option<AnyPosterior>) -> Result<Self>;
    /// Plan-time argument checks and coercions (prior argument excluded).
    fn coerce(arg_types: &[DataType]) -> Result<Vec<DataType>>;
    /// Statistics per group (each stored as a `[hi, lo]` slot pair).
    fn stats(&self) -> usize;
    /// f64 slots per group: two per statistic.
    fn width(&self) -> usize {
        2 * self.stats()
    }
    /// Add (or with `retract`, remove) a batch of rows into `stats`.
    fn apply(
        &self,
        values: &[ArrayRef],
        groups: &[usize],
        filter: Option<&BooleanArray>,
        stats: &mut [f64],
        retract: bool,
    ) -> Result<()>;
    /// Merge one group's statistics `other` into `into`: compensated sums of every
    /// statistic (all kernels keep additive statistics).
    fn merge(&self, into: &mut [f64], other: &[f64]) {
        for (a, b) in into.chunks_exact_mut(2).zip(other.chunks_exact(2)) {
            Dd::accumulate_dd(a, Dd::from_slot(b));
        }
    }
    /// The result column for `stats` (groups × width).
    fn finish(&self, stats: &[f64]) -> Result<ArrayRef>;
}

/// `true` for rows that take part: inside the filter and with no NULL argument.
fn row_ok(filter: Option<&BooleanArray>, columns: &[&dyn Array], i: usize) -> bool {
    filter.is_none_or(|f| f.is_valid(i) && f.value(i)) && columns.iter().all(|c| c.is_valid(i))
}

fn f64_column(values: &[ArrayRef], i: usize) -> Result<Float64Array> {
    Ok(cast(&values[i], &DataType::Float64)?
        .as_primitive::<Float64Type>()
        .clone())
}

/// The type of a column's values: a dictionary-encoded column (as pandas' category
/// dtype arrives) by its values, any other as it is.
pub(crate) fn values_type(t: &DataType) -> &DataType {
    match t {
        DataType::Dictionary(_, values) => values.as_ref(),
        t => t,
    }
}

/// Whether the fits take a column of type `t` as numbers: numeric and boolean
/// values, also dictionary-encoded.
pub(crate) fn is_number(t: &DataType) -> bool {
    let values = values_type(t);
    values.is_numeric() || matches!(values, DataType::Boolean | DataType::Null)
}

/// Inputs the fits take as numbers coerce to Float64; anything else is a plan error.
fn numeric(function: &str, argument: &str, t: &DataType) -> Result<DataType> {
    if is_number(t) {
        Ok(DataType::Float64)
    } else {
        plan_err!(
            "{function}: argument {argument} is {}; expected a number or boolean",
            describe_type(t)
        )
    }
}

fn prior_type(function: &str, kind: Kind, t: &DataType) -> Result<DataType> {
    match Kind::detect(t) {
        Some(k) if k == kind => Ok(t.clone()),
        _ => plan_err!(
            "{function}: argument prior is {}; expected a {} prior such as {}",
            describe_type(t),
            kind.name(),
            match kind {
                Kind::Beta => "beta_prior(0.5, 0.5)",
                Kind::Gamma => "gamma_prior(0.5, 1)",
                Kind::Nig => "nig_prior(0, 0.0001, 1.5, 1)",
                Kind::Dirichlet => "dirichlet_prior(['a', 'b'], 1)",
            }
        ),
    }
}

/// Coercion for `name(value [, prior [, weight]])`.
fn value_prior_weight(
    name: &str,
    value: &str,
    kind: Kind,
    t: &[DataType],
) -> Result<Vec<DataType>> {
    check_arity(name, t.len(), 1, 3)?;
    let mut out = vec![numeric(name, value, &t[0])?];
    if t.len() > 1 {
        out.push(prior_type(name, kind, &t[1])?);
    }
    if t.len() > 2 {
        out.push(numeric(name, "weight", &t[2])?);
    }
    Ok(out)
}

/// Argument `i` as Float64 when the call has it.
fn optional_f64(values: &[ArrayRef], i: usize) -> Result<Option<Float64Array>> {
    values.get(i).map(|_| f64_column(values, i)).transpose()
}

/// Add (or remove) one row's two additive statistics to group `g`.
fn add_pair(stats: &mut [f64], g: usize, first: f64, second: f64, retract: bool) {
    add_stat(&mut stats[4 * g..4 * g + 2], first, retract);
    add_stat(&mut stats[4 * g + 2..4 * g + 4], second, retract);
}

/// Add (or remove) `amount` to one compensated statistic.
fn add_stat(slot: &mut [f64], amount: f64, retract: bool) {
    if !retract {
        Dd::accumulate(slot, amount);
        return;
    }
    Dd::accumulate(slot, -amount);
    // Removing what was added leaves an exact zero unless the sum was rounded;
    // clear that rounding with the same tolerance as the family code.
    let left = Dd::from_slot(slot).value();
    if left < 0.0 && left > -1e-9 * amount.abs().max(1.0) {
        slot[0] = 0.0;
        slot[1] = 0.0;
    }
}

/// The rounded values of a group's compensated statistics, statistic by statistic.
fn values_of(stats: &[f64], per_group: usize) -> Vec<Vec<f64>> {
    let groups = stats.len() / (2 * per_group);
    let mut out = vec![Vec::with_capacity(groups); per_group];
    for g in stats.chunks_exact(2 * per_group) {
        for (j, slot) in g.chunks_exact(2).enumerate() {
            out[j].push(Dd::from_slot(slot).value());
        }
    }
    out
}

// ---------------------------------------------------------------- Beta (0/1 rows)

/// Add 0/1 outcomes with unit weights: successes in slot 0, trials in slot 2 of
/// each group. Returns the first value that is not 0 or 1, if any (the counts are
/// then discarded with the query's error).
fn count_outcomes<T: Copy>(
    values: &[T],
    groups: &[usize],
    stats: &mut [f64],
    as_f64: impl Fn(T) -> f64,
) -> Option<f64> {
    let mut bad = false;
    for (&g, &v) in groups.iter().zip(values) {
        let v = as_f64(v);
        bad |= v != 0.0 && v != 1.0;
        stats[4 * g] += v;
        stats[4 * g + 2] += 1.0;
    }
    bad.then(|| {
        let v = values.iter().map(|v| as_f64(*v));
        v.into_iter()
            .find(|v| *v != 0.0 && *v != 1.0)
            .unwrap_or(f64::NAN)
    })
}

#[derive(Debug, Clone)]
pub struct BetaOutcomes {
    prior: BetaPrior,
}

fn beta_prior_of(p: Option<AnyPosterior>) -> Result<BetaPrior> {
    match p {
        None => Ok(BetaPrior::JEFFREYS),
        Some(AnyPosterior::Beta(b)) => {
            let (a, b) = b.params();
            Ok(BetaPrior { a0: a, b0: b })
        }
        Some(other) => plan_err!("expected a Beta prior, got {}", other.kind().name()),
    }
}

fn beta_finish(function: &str, prior: &BetaPrior, stats: &[f64]) -> Result<ArrayRef> {
    let groups = stats.len() / 4;
    let [successes, trials]: [Vec<f64>; 2] = values_of(stats, 2)
        .try_into()
        .map_err(|_| DataFusionError::Internal("two statistics".into()))?;
    build_floats(
        function,
        Kind::Beta,
        vec![
            vec![prior.a0; groups],
            vec![prior.b0; groups],
            successes,
            trials,
        ],
    )
}

impl FitKernel for BetaOutcomes {
    const NAME: &'static str = "beta_posterior";
    const KIND: Kind = Kind::Beta;
    const STATE: StateLayout = StateLayout::Columns(&["successes", "trials"]);
    const PRIOR_ARG: usize = 1;

    fn new(prior: Option<AnyPosterior>) -> Result<Self> {
        Ok(BetaOutcomes {
            prior: beta_prior_of(prior)?,
        })
    }

    fn coerce(t: &[DataType]) -> Result<Vec<DataType>> {
        let mut out = value_prior_weight(Self::NAME, "outcome", Kind::Beta, t)?;
        // 0/1 integers and booleans are counted as they are, without a cast per batch.
        if matches!(t[0], DataType::Int64 | DataType::Int32 | DataType::Boolean) {
            out[0] = t[0].clone();
        }
        Ok(out)
    }

    fn stats(&self) -> usize {
        2
    }

    fn apply(
        &self,
        values: &[ArrayRef],
        groups: &[usize],
        filter: Option<&BooleanArray>,
        stats: &mut [f64],
        retract: bool,
    ) -> Result<()> {
        let column = &values[0];
        if filter.is_none() && values.len() < 3 && column.null_count() == 0 && !retract {
            // Hot path: every row counts with weight one; validate after the loop.
            // Sums of 0/1 are exact integers in the high slots (the low slots stay
            // zero), so plain additions are already order-independent.
            let bad = match column.data_type() {
                DataType::Int64 => {
                    let v = column.as_primitive::<Int64Type>().values();
                    count_outcomes(v, groups, stats, |v| v as f64)
                }
                DataType::Int32 => {
                    let v = column.as_primitive::<Int32Type>().values();
                    count_outcomes(v, groups, stats, f64::from)
                }
                DataType::Boolean => {
                    let bits = column.as_boolean().values();
                    for (&g, v) in groups.iter().zip(bits.iter()) {
                        stats[4 * g] += f64::from(u8::from(v));
                        stats[4 * g + 2] += 1.0;
                    }
                    None
                }
                _ => count_outcomes(f64_column(values, 0)?.values(), groups, stats, |v| v),
            };
            return match bad {
                Some(v) => Err(family_error(Self::NAME, check_outcome(v).unwrap_err())),
                None => Ok(()),
            };
        }
        let y = f64_column(values, 0)?;
        let w = optional_f64(values, 2)?;
        for (i, &g) in groups.iter().enumerate() {
            let cols: Vec<&dyn Array> = match &w {
                Some(w) => vec![&y, w],
                None => vec![&y],
            };
            if !row_ok(filter, &cols, i) {
                continue;
            }
            let v = check_outcome(y.value(i)).map_err(|e| family_error(Self::NAME, e))?;
            let wt = match &w {
                Some(w) => crate::family::beta::check_weight(w.value(i))
                    .map_err(|e| family_error(Self::NAME, e))?,
                None => 1.0,
            };
            add_pair(stats, g, v * wt, wt, retract);
        }
        Ok(())
    }

    fn finish(&self, stats: &[f64]) -> Result<ArrayRef> {
        beta_finish(Self::NAME, &self.prior, stats)
    }
}

// ------------------------------------------------------ Beta (pre-aggregated counts)

#[derive(Debug, Clone)]
pub struct BetaCounts {
    prior: BetaPrior,
}

impl FitKernel for BetaCounts {
    const NAME: &'static str = "beta_posterior_counts";
    const KIND: Kind = Kind::Beta;
    const STATE: StateLayout = StateLayout::Columns(&["successes", "trials"]);
    const PRIOR_ARG: usize = 2;

    fn new(prior: Option<AnyPosterior>) -> Result<Self> {
        Ok(BetaCounts {
            prior: beta_prior_of(prior)?,
        })
    }

    fn coerce(t: &[DataType]) -> Result<Vec<DataType>> {
        check_arity(Self::NAME, t.len(), 2, 3)?;
        let mut out = vec![
            numeric(Self::NAME, "successes", &t[0])?,
            numeric(Self::NAME, "trials", &t[1])?,
        ];
        if t.len() > 2 {
            out.push(prior_type(Self::NAME, Kind::Beta, &t[2])?);
        }
        Ok(out)
    }

    fn stats(&self) -> usize {
        2
    }

    fn apply(
        &self,
        values: &[ArrayRef],
        groups: &[usize],
        filter: Option<&BooleanArray>,
        stats: &mut [f64],
        retract: bool,
    ) -> Result<()> {
        let s = f64_column(values, 0)?;
        let n = f64_column(values, 1)?;
        for (i, &g) in groups.iter().enumerate() {
            if !row_ok(filter, &[&s, &n], i) {
                continue;
            }
            let mut one = BetaPosterior::new(self.prior);
            one.observe_counts(s.value(i), n.value(i))
                .map_err(|e| family_error(Self::NAME, e))?;
            add_pair(stats, g, one.successes, one.trials, retract);
        }
        Ok(())
    }

    fn finish(&self, stats: &[f64]) -> Result<ArrayRef> {
        beta_finish(Self::NAME, &self.prior, stats)
    }
}

// ------------------------------------------------------------------------- Gamma

#[derive(Debug, Clone)]
pub struct GammaCounts {
    prior: GammaPrior,
}

impl FitKernel for GammaCounts {
    const NAME: &'static str = "gamma_posterior";
    const KIND: Kind = Kind::Gamma;
    const STATE: StateLayout = StateLayout::Columns(&["events", "exposure"]);
    const PRIOR_ARG: usize = 2;

    fn new(prior: Option<AnyPosterior>) -> Result<Self> {
        let prior = match prior {
            None => GammaPrior::DEFAULT,
            Some(AnyPosterior::Gamma(g)) => {
                let (shape, rate) = g.params();
                GammaPrior {
                    shape0: shape,
                    rate0: rate,
                }
            }
            Some(other) => return plan_err!("expected a Gamma prior, got {}", other.kind().name()),
        };
        Ok(GammaCounts { prior })
    }

    fn coerce(t: &[DataType]) -> Result<Vec<DataType>> {
        check_arity(Self::NAME, t.len(), 1, 3)?;
        let mut out = vec![numeric(Self::NAME, "events", &t[0])?];
        if t.len() > 1 {
            out.push(numeric(Self::NAME, "exposure", &t[1])?);
        }
        if t.len() > 2 {
            out.push(prior_type(Self::NAME, Kind::Gamma, &t[2])?);
        }
        Ok(out)
    }

    fn stats(&self) -> usize {
        2
    }

    fn apply(
        &self,
        values: &[ArrayRef],
        groups: &[usize],
        filter: Option<&BooleanArray>,
        stats: &mut [f64],
        retract: bool,
    ) -> Result<()> {
        let events = f64_column(values, 0)?;
        let exposure = if values.len() > 1 {
            Some(f64_column(values, 1)?)
        } else {
            None
        };
        for (i, &g) in groups.iter().enumerate() {
            let ok = match &exposure {
                Some(t) => row_ok(filter, &[&events, t], i),
                None => row_ok(filter, &[&events], i),
            };
            if !ok {
                continue;
            }
            let mut one = GammaPosterior::new(self.prior);
            let t = exposure.as_ref().map_or(1.0, |t| t.value(i));
            one.observe(events.value(i), t)
                .map_err(|e| family_error(Self::NAME, e))?;
            add_pair(stats, g, one.events, one.exposure, retract);
        }
        Ok(())
    }

    fn finish(&self, stats: &[f64]) -> Result<ArrayRef> {
        let groups = stats.len() / 4;
        let [events, exposure]: [Vec<f64>; 2] = values_of(stats, 2)
            .try_into()
            .map_err(|_| DataFusionError::Internal("two statistics".into()))?;
        build_floats(
            Self::NAME,
            Kind::Gamma,
            vec![
                vec![self.prior.shape0; groups],
                vec![self.prior.rate0; groups],
                events,
                exposure,
            ],
        )
    }
}

// --------------------------------------------------------------------------- NIG

#[derive(Debug, Clone)]
pub struct NigValues {
    prior: NigPrior,
}

impl FitKernel for NigValues {
    const NAME: &'static str = "nig_posterior";
    const KIND: Kind = Kind::Nig;
    const STATE: StateLayout = StateLayout::Columns(&["weight", "centred_sum", "centred_squares"]);
    const PRIOR_ARG: usize = 1;

    fn new(prior: Option<AnyPosterior>) -> Result<Self> {
        let prior = match prior {
            None => NigPrior::DEFAULT,
            Some(AnyPosterior::Nig(p)) => {
                let q = p.params();
                NigPrior {
                    mu0: q.mu,
                    kappa0: q.kappa,
                    alpha0: q.alpha,
                    beta0: q.beta,
                }
            }
            Some(other) => {
                return plan_err!(
                    "expected a Normal-Inverse-Gamma prior, got {}",
                    other.kind().name()
                )
            }
        };
        Ok(NigValues { prior })
    }

    fn coerce(t: &[DataType]) -> Result<Vec<DataType>> {
        value_prior_weight(Self::NAME, "value", Kind::Nig, t)
    }

    /// Centred power sums: weight, weighted deviation, weighted squared deviation
    /// from the prior mean (see [`crate::family::nig::centred_terms`]).
    fn stats(&self) -> usize {
        3
    }

    fn apply(
        &self,
        values: &[ArrayRef],
        groups: &[usize],
        filter: Option<&BooleanArray>,
        stats: &mut [f64],
        retract: bool,
    ) -> Result<()> {
        let x = f64_column(values, 0)?;
        let w = optional_f64(values, 2)?;
        for (i, &g) in groups.iter().enumerate() {
            let ok = match &w {
                Some(w) => row_ok(filter, &[&x, w], i),
                None => row_ok(filter, &[&x], i),
            };
            if !ok {
                continue;
            }
            let wt = w.as_ref().map_or(1.0, |w| w.value(i));
            let terms = centred_terms(x.value(i), wt, self.prior.mu0)
                .map_err(|e| family_error(Self::NAME, e))?;
            let s = &mut stats[6 * g..6 * g + 6];
            for (slot, term) in s.chunks_exact_mut(2).zip(terms) {
                Dd::accumulate_dd(slot, if retract { -term } else { term });
            }
            if retract && Dd::from_slot(&s[0..2]).value() <= 1e-12 * wt.max(1.0) {
                // The frame is empty again: clear what rounding left behind.
                s.fill(0.0);
            }
        }
        Ok(())
    }

    fn finish(&self, stats: &[f64]) -> Result<ArrayRef> {
        let groups = stats.len() / 6;
        let mut cols = vec![
            vec![self.prior.mu0; groups],
            vec![self.prior.kappa0; groups],
            vec![self.prior.alpha0; groups],
            vec![self.prior.beta0; groups],
            Vec::with_capacity(groups),
            Vec::with_capacity(groups),
            Vec::with_capacity(groups),
        ];
        for s in stats.chunks_exact(6) {
            let st = stats_from_centred(
                Dd::from_slot(&s[0..2]),
                Dd::from_slot(&s[2..4]),
                Dd::from_slot(&s[4..6]),
                self.prior.mu0,
            );
            cols[4].push(st.n);
            cols[5].push(st.mean);
            cols[6].push(st.m2);
        }
        build_floats(Self::NAME, Kind::Nig, cols)
    }
}

// --------------------------------------------------------------------- Dirichlet

#[derive(Debug, Clone)]
pub struct DirichletClasses {
    prior: DirichletPrior,
    classes: ClassIndex,
}

impl FitKernel for DirichletClasses {
    const NAME: &'static str = "dirichlet_posterior";
    const KIND: Kind = Kind::Dirichlet;
    /// Per class, the compensated count as a `[hi, lo]` pair.
    const STATE: StateLayout = StateLayout::List("counts");
    const PRIOR_ARG: usize = 1;

    fn new(prior: Option<AnyPosterior>) -> Result<Self> {
        match prior {
            Some(AnyPosterior::Dirichlet(p)) => Ok(DirichletClasses {
                classes: ClassIndex::new(&p.prior.classes),
                prior: DirichletPrior {
                    classes: p.prior.classes.clone(),
                    alpha0: p.params(),
                },
            }),
            Some(other) => plan_err!("expected a Dirichlet prior, got {}", other.kind().name()),
            None => plan_err!(
                "dirichlet_posterior: a prior naming the classes is required, e.g. \
                 dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show'], 1))"
            ),
        }
    }

    fn coerce(t: &[DataType]) -> Result<Vec<DataType>> {
        check_arity(Self::NAME, t.len(), 2, 3)?;
        // Text stays in its own layout (no copy into Utf8); other types are cast to text.
        let class = match &t[0] {
            DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View => t[0].clone(),
            _ => DataType::Utf8,
        };
        let mut out = vec![class, prior_type(Self::NAME, Kind::Dirichlet, &t[1])?];
        if t.len() > 2 {
            out.push(numeric(Self::NAME, "weight", &t[2])?);
        }
        Ok(out)
    }

    fn stats(&self) -> usize {
        self.prior.classes.len()
    }

    fn apply(
        &self,
        values: &[ArrayRef],
        groups: &[usize],
        filter: Option<&BooleanArray>,
        stats: &mut [f64],
        retract: bool,
    ) -> Result<()> {
        let w = optional_f64(values, 2)?;
        let column = &values[0];
        let codes = self.class_codes(column)?;
        let k = self.stats();
        if filter.is_none() && w.is_none() && !retract {
            // Hot path: unit weights. Counts are exact integers in the high slots
            // (the low slots stay zero), so plain additions are order-independent.
            let mut unknown = false;
            for (&g, &c) in groups.iter().zip(&codes) {
                if c < UNKNOWN {
                    stats[2 * (k * g + c as usize)] += 1.0;
                } else {
                    unknown |= c == UNKNOWN;
                }
            }
            if unknown {
                let i = codes.iter().position(|&c| c == UNKNOWN).unwrap_or(0);
                return Err(self.unknown_class(column, i));
            }
            return Ok(());
        }
        for (i, (&g, &c)) in groups.iter().zip(&codes).enumerate() {
            let ok = match &w {
                Some(w) => row_ok(filter, &[w as &dyn Array], i),
                None => row_ok(filter, &[], i),
            };
            if c == SKIP || !ok {
                continue;
            }
            if c == UNKNOWN {
                return Err(self.unknown_class(column, i));
            }
            let wt = match &w {
                Some(w) => crate::family::beta::check_weight(w.value(i))
                    .map_err(|e| family_error(Self::NAME, e))?,
                None => 1.0,
            };
            let slot = 2 * (k * g + c as usize);
            add_stat(&mut stats[slot..slot + 2], wt, retract);
        }
        Ok(())
    }

    fn finish(&self, stats: &[f64]) -> Result<ArrayRef> {
        let rows: Vec<Option<AnyPosterior>> = stats
            .chunks_exact(self.width())
            .map(|c| {
                Some(AnyPosterior::Dirichlet(DirichletPosterior {
                    prior: self.prior.clone(),
                    counts: c
                        .chunks_exact(2)
                        .map(|s| Dd::from_slot(s).value())
                        .collect(),
                }))
            })
            .collect();
        build(Self::NAME, Kind::Dirichlet, &rows)
    }
}

/// The code of a row whose class is NULL: it does not count.
const SKIP: u32 = u32::MAX;
/// The code of a class the prior does not name: an error if the row counts.
const UNKNOWN: u32 = u32::MAX - 1;

impl DirichletClasses {
    /// Each row's class position in the prior's list, `SKIP` or `UNKNOWN`.
    fn class_codes(&self, column: &ArrayRef) -> Result<Vec<u32>> {
        let classes = &self.classes;
        Ok(match column.data_type() {
            DataType::Utf8View => view_codes(classes, column.as_string_view()),
            DataType::LargeUtf8 => codes_of(classes, column.as_string::<i64>().iter()),
            DataType::Utf8 => codes_of(classes, column.as_string::<i32>().iter()),
            _ => codes_of(
                classes,
                cast(column, &DataType::Utf8)?.as_string::<i32>().iter(),
            ),
        })
    }

    /// The error for row `i`, whose class the prior does not name.
    fn unknown_class(&self, column: &ArrayRef, i: usize) -> DataFusionError {
        let class = match cast(&column.slice(i, 1), &DataType::Utf8) {
            Ok(text) => text.as_string::<i32>().value(0).to_owned(),
            Err(e) => return e.into(),
        };
        match self.prior.index_of(&class) {
            Err(e) => family_error(Self::NAME, e),
            Ok(_) => DataFusionError::Internal(format!("{}: class lookup failed", Self::NAME)),
        }
    }
}

/// Class codes of a `Utf8View` column. Within one array equal views are equal
/// text (a long view names its bytes by buffer and offset, and the Parquet
/// reader gives every row of a dictionary value the same view), so a small cache
/// keyed by the whole view answers most rows with one comparison and no branch
/// that depends on the class: the profile showed the per-row search mispredicting.
fn view_codes(classes: &ClassIndex, text: &StringViewArray) -> Vec<u32> {
    const SLOTS: usize = 64;
    // No array holds u32::MAX buffers, so this view never occurs.
    const EMPTY: u128 = u128::MAX;
    let mut cache = [(EMPTY, 0u32); SLOTS];
    let nulls = text.nulls();
    let mut codes = Vec::with_capacity(text.len());
    for (i, &view) in text.views().iter().enumerate() {
        if nulls.is_some_and(|n| n.is_null(i)) {
            codes.push(SKIP);
            continue;
        }
        let folded = (view as u64) ^ ((view >> 64) as u64);
        let slot = &mut cache[(folded.wrapping_mul(0x9E37_79B9_7F4A_7C15) >> 58) as usize];
        if slot.0 != view {
            *slot = (view, classes.find_view(view, || text.value(i)));
        }
        codes.push(slot.1);
    }
    codes
}

fn codes_of<'a>(classes: &ClassIndex, text: impl Iterator<Item = Option<&'a str>>) -> Vec<u32> {
    text.map(|c| c.map_or(SKIP, |c| classes.find(c))).collect()
}

/// The prior's classes, found by their text. A `Utf8View` holds text of at most
/// 12 bytes inside its 16-byte view, so such a class is found by comparing one
/// integer per row, without touching the text buffers.
#[derive(Debug, Clone)]
struct ClassIndex {
    classes: Vec<String>,
    /// Each class's view when it is short enough to be inlined.
    inline: Vec<Option<u128>>,
    /// For long class lists, a map instead of a scan.
    by_text: Option<HashMap<String, u32>>,
}

/// Up to this many classes a scan beats hashing the text (common practice, no source).
const SCAN_CLASSES: usize = 16;

impl ClassIndex {
    fn new(classes: &[String]) -> Self {
        let inline = classes
            .iter()
            .map(|c| (c.len() <= 12).then(|| make_view(c.as_bytes(), 0, 0)))
            .collect();
        let by_text = (classes.len() > SCAN_CLASSES).then(|| {
            let positions = classes.iter().enumerate();
            positions.map(|(i, c)| (c.clone(), i as u32)).collect()
        });
        ClassIndex {
            classes: classes.to_vec(),
            inline,
            by_text,
        }
    }

    fn find(&self, class: &str) -> u32 {
        let found = match &self.by_text {
            Some(map) => map.get(class).copied(),
            None => self
                .classes
                .iter()
                .position(|c| c == class)
                .map(|c| c as u32),
        };
        found.unwrap_or(UNKNOWN)
    }

    /// The class of one view; `text` reads the full value when it is not inlined.
    #[inline]
    fn find_view<'a>(&self, view: u128, text: impl FnOnce() -> &'a str) -> u32 {
        let len = view as u32 as usize;
        if len > 12 || self.by_text.is_some() {
            return self.find(text());
        }
        // Bytes past the length are zero in a valid view; mask them anyway so
        // that a writer that left them dirty still matches.
        let mask = match len {
            12 => u128::MAX,
            _ => (1u128 << (32 + 8 * len)) - 1,
        };
        let view = view & mask;
        let found = self.inline.iter().position(|c| *c == Some(view));
        found.map_or(UNKNOWN, |c| c as u32)
    }
}

// ------------------------------------------------------------ the generic adapter

/// A fit aggregate for kernel `K`.
///
/// The registered instance knows no prior. The engine asks an aggregate for the
/// value of an empty window frame or an empty decorrelated group through
/// `default_value`, which sees only the return type; so posterity's planning rule
/// ([`crate::prior_binding`]) replaces each call that passes a constant prior by an
/// instance bound to that prior, whose empty value is that prior.
#[derive(Debug)]
pub struct FitAggregate<K: FitKernel> {
    signature: Signature,
    /// The constant prior of the call this instance was bound to.
    prior: Option<ScalarValue>,
    /// Shared with an engine that cannot run the binding rule (Python, through the
    /// engine's function interface): empty frames and groups are NULL there, so
    /// the result is declared nullable.
    foreign: bool,
    _kernel: std::marker::PhantomData<K>,
}

impl<K: FitKernel> PartialEq for FitAggregate<K> {
    fn eq(&self, other: &Self) -> bool {
        self.signature == other.signature && self.prior == other.prior
    }
}
impl<K: FitKernel> Eq for FitAggregate<K> {}
impl<K: FitKernel> Hash for FitAggregate<K> {
    fn hash<H: std::hash::Hasher>(&self, state: &mut H) {
        K::NAME.hash(state);
        self.prior.hash(state);
    }
}

impl<K: FitKernel> Default for FitAggregate<K> {
    fn default() -> Self {
        FitAggregate {
            signature: Signature::user_defined(Volatility::Immutable),
            prior: None,
            foreign: false,
            _kernel: std::marker::PhantomData,
        }
    }
}

impl<K: FitKernel> FitAggregate<K> {
    /// The aggregate for an engine that cannot run posterity's planning rules.
    pub fn for_foreign_engine() -> Self {
        FitAggregate {
            foreign: true,
            ..FitAggregate::default()
        }
    }
}

/// Each fit aggregate's name, the index of its prior argument, and the prior it
/// uses when the call gives none (`None` where a call must give one), for SQL
/// written for an engine that cannot run [`crate::prior_binding`]
/// ([`crate::window_priors`]).
pub fn fit_priors() -> Vec<(&'static str, usize, Option<AnyPosterior>)> {
    fn one<K: FitKernel>() -> (&'static str, usize, Option<AnyPosterior>) {
        // The posterior of no rows is the prior.
        let default = K::new(None).ok().and_then(|kernel| {
            let column = kernel.finish(&vec![0.0; kernel.width()]).ok()?;
            let column = crate::layout::PosteriorColumn::new(K::NAME, &column).ok()?;
            column.get(0).ok().flatten()
        });
        (K::NAME, K::PRIOR_ARG, default)
    }
    vec![
        one::<BetaOutcomes>(),
        one::<BetaCounts>(),
        one::<GammaCounts>(),
        one::<NigValues>(),
        one::<DirichletClasses>(),
    ]
}

/// A fit aggregate that can be bound to the constant prior of one call.
pub trait BindPrior {
    /// Index of the prior among the call's arguments.
    fn prior_argument(&self) -> usize;
    /// Whether this instance is already bound.
    fn is_bound(&self) -> bool;
    /// The prior this instance is bound to.
    fn bound_prior(&self) -> Option<&ScalarValue>;
    /// An instance bound to `prior` (checked as this family's prior).
    fn bind(&self, prior: ScalarValue) -> Result<AggregateUDF>;
}

impl<K: FitKernel> BindPrior for FitAggregate<K> {
    fn prior_argument(&self) -> usize {
        K::PRIOR_ARG
    }

    fn is_bound(&self) -> bool {
        self.prior.is_some()
    }

    fn bound_prior(&self) -> Option<&ScalarValue> {
        self.prior.as_ref()
    }

    fn bind(&self, prior: ScalarValue) -> Result<AggregateUDF> {
        decode_prior::<K>(&prior)?;
        Ok(AggregateUDF::new_from_impl(FitAggregate::<K> {
            signature: self.signature.clone(),
            prior: Some(prior),
            foreign: self.foreign,
            _kernel: std::marker::PhantomData,
        }))
    }
}

/// The value of `expr` when it is a constant (`None` when it reads a column; an
/// error when computing the constant fails). A native constant evaluates to one
/// value on no rows. Through the foreign-function interface constants come back as
/// arrays, so one row of NULLs decides: a column gives NULL, a constant its value.
fn constant_value(
    expr: &Arc<dyn datafusion::physical_expr::PhysicalExpr>,
    schema: &datafusion::arrow::datatypes::Schema,
) -> Result<Option<ScalarValue>> {
    use datafusion::arrow::array::{new_null_array, RecordBatch};
    use datafusion::arrow::datatypes::Schema;
    use datafusion::logical_expr::ColumnarValue;
    let no_rows = RecordBatch::new_empty(Arc::new(schema.clone()));
    match expr.evaluate(&no_rows) {
        Ok(ColumnarValue::Scalar(value)) => return Ok(Some(value)),
        Err(e) if datafusion::physical_expr::utils::collect_columns(expr).is_empty() => {
            return Err(e)
        }
        Err(_) => return Ok(None),
        Ok(ColumnarValue::Array(_)) => {}
    }
    let nullable = Schema::new(
        schema
            .fields()
            .iter()
            .map(|f| f.as_ref().clone().with_nullable(true))
            .collect::<Vec<_>>(),
    );
    let nulls = nullable
        .fields()
        .iter()
        .map(|f| new_null_array(f.data_type(), 1))
        .collect();
    let one_row = RecordBatch::try_new(Arc::new(nullable), nulls)?;
    Ok(match expr.evaluate(&one_row)? {
        ColumnarValue::Scalar(value) => Some(value).filter(|v| !v.is_null()),
        ColumnarValue::Array(a) if a.len() == 1 && a.is_valid(0) => {
            Some(ScalarValue::try_from_array(&a, 0)?)
        }
        ColumnarValue::Array(_) => None,
    })
}

/// The kernel for a constant prior value (a NULL prior means the default).
fn decode_prior<K: FitKernel>(prior: &ScalarValue) -> Result<K> {
    let array = prior.to_array()?;
    let column = PosteriorColumn::new(K::NAME, &array)?;
    K::new(column.get(0).map_err(|e| family_error(K::NAME, e))?)
}

impl<K: FitKernel> FitAggregate<K> {
    /// The kernel for a call: a bound instance's own prior, else the call's.
    fn kernel_for(&self, args: &AccumulatorArgs) -> Result<K> {
        match &self.prior {
            Some(prior) => decode_prior::<K>(prior),
            None => Self::kernel(args),
        }
    }

    /// The kernel for one call: the prior argument must be a planning-time constant.
    fn kernel(args: &AccumulatorArgs) -> Result<K> {
        let Some(expr) = args.exprs.get(K::PRIOR_ARG) else {
            return K::new(None);
        };
        let invalid = |e: DataFusionError| {
            plan_err!(
                "{}: the prior (argument {}) is invalid: {}",
                K::NAME,
                K::PRIOR_ARG + 1,
                match e.find_root() {
                    DataFusionError::Execution(m) | DataFusionError::Plan(m) => m.clone(),
                    other => other.strip_backtrace(),
                }
            )
        };
        if let Some(literal) = expr.downcast_ref::<Literal>() {
            return decode_prior::<K>(literal.value());
        }
        // Not folded: a constant that failed to fold (beta_prior(0, 1)), or one that
        // reached us through the foreign-function interface (Python), where
        // expressions are opaque.
        match constant_value(expr, args.schema) {
            Ok(Some(value)) => decode_prior::<K>(&value),
            Err(e) => invalid(e),
            _ => plan_err!(
                "{}: the prior (argument {}) must be a constant such as beta_prior(1, 1); to give \
                 levels different priors, fit with one prior and re-prior the result with \
                 posterior_with_prior",
                K::NAME,
                K::PRIOR_ARG + 1
            ),
        }
    }

    fn state_fields_for(name: &str) -> Vec<FieldRef> {
        match K::STATE {
            StateLayout::List(stat) => vec![Arc::new(Field::new(
                format!("{name}[{stat}]"),
                DataType::List(Arc::new(Field::new_list_field(DataType::Float64, true))),
                true,
            ))],
            StateLayout::Columns(stats) => stats
                .iter()
                .flat_map(|stat| [format!("{name}[{stat}]"), format!("{name}[{stat}.lo]")])
                .map(|field| Arc::new(Field::new(field, DataType::Float64, true)))
                .collect(),
        }
    }
}

impl<K: FitKernel> AggregateUDFImpl for FitAggregate<K> {
    fn name(&self) -> &str {
        K::NAME
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn coerce_types(&self, arg_types: &[DataType]) -> Result<Vec<DataType>> {
        // A bound instance reads its prior from itself; the planning rule replaced
        // the call's prior argument by a NULL (see `crate::prior_binding`).
        let prior_gone =
            self.prior.is_some() && arg_types.get(K::PRIOR_ARG) == Some(&DataType::Null);
        if !prior_gone {
            return K::coerce(arg_types);
        }
        let mut types = arg_types.to_vec();
        types[K::PRIOR_ARG] = K::KIND.data_type();
        let mut out = K::coerce(&types)?;
        out[K::PRIOR_ARG] = DataType::Null;
        Ok(out)
    }

    fn return_type(&self, _arg_types: &[DataType]) -> Result<DataType> {
        Ok(K::KIND.data_type())
    }

    fn is_nullable(&self) -> bool {
        self.foreign
    }

    fn accumulator(&self, args: AccumulatorArgs) -> Result<Box<dyn Accumulator>> {
        crate::distinct::refuse(K::NAME, args.is_distinct)?;
        Ok(Box::new(FitAccumulator {
            groups: FitGroups::new(self.kernel_for(&args)?),
        }))
    }

    fn state_fields(&self, args: StateFieldsArgs) -> Result<Vec<FieldRef>> {
        Ok(Self::state_fields_for(args.name))
    }

    fn groups_accumulator_supported(&self, _args: AccumulatorArgs) -> bool {
        true
    }

    fn create_groups_accumulator(
        &self,
        args: AccumulatorArgs,
    ) -> Result<Box<dyn GroupsAccumulator>> {
        crate::distinct::refuse(K::NAME, args.is_distinct)?;
        Ok(Box::new(FitGroups::new(self.kernel_for(&args)?)))
    }

    fn create_sliding_accumulator(&self, args: AccumulatorArgs) -> Result<Box<dyn Accumulator>> {
        self.accumulator(args)
    }

    fn default_value(&self, _data_type: &DataType) -> Result<ScalarValue> {
        // An empty frame or group still has a posterior: the call's prior.
        let kernel = match &self.prior {
            Some(prior) => decode_prior::<K>(prior)?,
            None => K::new(None).map_err(|_| {
                DataFusionError::Plan(format!(
                    "{}: an empty window frame or group needs the prior at planning time; \
                     register the functions with posterity::register(ctx), which installs \
                     the rule that binds it",
                    K::NAME
                ))
            })?,
        };
        ScalarValue::try_from_array(&kernel.finish(&vec![0.0; kernel.width()])?, 0)
    }

    fn documentation(&self) -> Option<&Documentation> {
        crate::docs::get(K::NAME)
    }
}

/// Per-group statistics in one flat vector.
#[derive(Debug)]
pub struct FitGroups<K: FitKernel> {
    kernel: K,
    stats: Vec<f64>,
}

impl<K: FitKernel> FitGroups<K> {
    fn new(kernel: K) -> Self {
        FitGroups {
            kernel,
            stats: Vec::new(),
        }
    }

    fn resize(&mut self, groups: usize) {
        let w = self.kernel.width();
        if self.stats.len() < groups * w {
            self.stats.resize(groups * w, 0.0);
        }
    }

    fn take(&mut self, emit_to: EmitTo) -> Vec<f64> {
        let w = self.kernel.width();
        match emit_to {
            EmitTo::All => std::mem::take(&mut self.stats),
            EmitTo::First(n) => {
                let rest = self.stats.split_off(n * w);
                std::mem::replace(&mut self.stats, rest)
            }
        }
    }

    fn state_arrays(&self, stats: Vec<f64>) -> Result<Vec<ArrayRef>> {
        let w = self.kernel.width();
        if let StateLayout::List(_) = K::STATE {
            let groups = stats.len() / w;
            let offsets = OffsetBuffer::from_lengths(std::iter::repeat_n(w, groups));
            let values = Arc::new(Float64Array::from(stats));
            let field = Arc::new(Field::new_list_field(DataType::Float64, true));
            Ok(vec![Arc::new(ListArray::try_new(
                field, offsets, values, None,
            )?)])
        } else {
            Ok((0..w)
                .map(|j| {
                    let col: Float64Array = stats.iter().skip(j).step_by(w).copied().collect();
                    Arc::new(col) as ArrayRef
                })
                .collect())
        }
    }

    /// Statistics of row `i` of a state batch.
    fn state_row(&self, values: &[ArrayRef], i: usize, out: &mut Vec<f64>) -> Result<()> {
        out.clear();
        if let StateLayout::List(_) = K::STATE {
            let list = values[0].as_list::<i32>();
            if list.is_null(i) {
                out.resize(self.kernel.width(), 0.0);
            } else {
                let row = list.value(i);
                out.extend(row.as_primitive::<Float64Type>().values().iter());
                if out.len() != self.kernel.width() {
                    return exec_err!(
                        "{}: a partial state has {} statistics, expected {}",
                        K::NAME,
                        out.len(),
                        self.kernel.width()
                    );
                }
            }
        } else {
            for v in values {
                let v = v.as_primitive::<Float64Type>();
                out.push(if v.is_null(i) { 0.0 } else { v.value(i) });
            }
        }
        Ok(())
    }
}

impl<K: FitKernel> GroupsAccumulator for FitGroups<K> {
    fn update_batch(
        &mut self,
        values: &[ArrayRef],
        group_indices: &[usize],
        opt_filter: Option<&BooleanArray>,
        total_num_groups: usize,
    ) -> Result<()> {
        self.resize(total_num_groups);
        self.kernel
            .apply(values, group_indices, opt_filter, &mut self.stats, false)
    }

    fn evaluate(&mut self, emit_to: EmitTo) -> Result<ArrayRef> {
        let stats = self.take(emit_to);
        self.kernel.finish(&stats)
    }

    fn state(&mut self, emit_to: EmitTo) -> Result<Vec<ArrayRef>> {
        let stats = self.take(emit_to);
        self.state_arrays(stats)
    }

    fn merge_batch(
        &mut self,
        values: &[ArrayRef],
        group_indices: &[usize],
        total_num_groups: usize,
    ) -> Result<()> {
        self.resize(total_num_groups);
        let w = self.kernel.width();
        let mut row = Vec::with_capacity(w);
        for (i, &g) in group_indices.iter().enumerate() {
            self.state_row(values, i, &mut row)?;
            let kernel = &self.kernel;
            kernel.merge(&mut self.stats[g * w..(g + 1) * w], &row);
        }
        Ok(())
    }

    fn convert_to_state(
        &self,
        values: &[ArrayRef],
        opt_filter: Option<&BooleanArray>,
    ) -> Result<Vec<ArrayRef>> {
        let rows = values.first().map_or(0, |v| v.len());
        let mut stats = vec![0.0; rows * self.kernel.width()];
        let groups: Vec<usize> = (0..rows).collect();
        self.kernel
            .apply(values, &groups, opt_filter, &mut stats, false)?;
        self.state_arrays(stats)
    }

    fn size(&self) -> usize {
        self.stats.capacity() * std::mem::size_of::<f64>() + std::mem::size_of::<Self>()
    }
}

/// One group, for plain and window aggregation (supports retraction).
#[derive(Debug)]
pub struct FitAccumulator<K: FitKernel> {
    groups: FitGroups<K>,
}

impl<K: FitKernel> Accumulator for FitAccumulator<K> {
    fn update_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        let n = values.first().map_or(0, |v| v.len());
        self.groups.resize(1);
        self.groups
            .kernel
            .apply(values, &vec![0; n], None, &mut self.groups.stats, false)
    }

    fn retract_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        let n = values.first().map_or(0, |v| v.len());
        self.groups.resize(1);
        self.groups
            .kernel
            .apply(values, &vec![0; n], None, &mut self.groups.stats, true)
    }

    fn supports_retract_batch(&self) -> bool {
        true
    }

    fn evaluate(&mut self) -> Result<ScalarValue> {
        self.groups.resize(1);
        let array = self.groups.kernel.finish(&self.groups.stats)?;
        Ok(crate::layout::one_row_scalar(&array))
    }

    fn size(&self) -> usize {
        self.groups.size()
    }

    fn state(&mut self) -> Result<Vec<ScalarValue>> {
        self.groups.resize(1);
        let arrays = self.groups.state_arrays(self.groups.stats.clone())?;
        arrays
            .iter()
            .map(|a| ScalarValue::try_from_array(a, 0))
            .collect()
    }

    fn merge_batch(&mut self, states: &[ArrayRef]) -> Result<()> {
        let n = states.first().map_or(0, |v| v.len());
        GroupsAccumulator::merge_batch(&mut self.groups, states, &vec![0; n], 1)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use datafusion::arrow::array::{Int64Array, StringArray};

    fn posteriors(array: &ArrayRef) -> Vec<Option<AnyPosterior>> {
        let column = PosteriorColumn::new("test", array).unwrap();
        (0..array.len()).map(|i| column.get(i).unwrap()).collect()
    }

    fn beta() -> FitGroups<BetaOutcomes> {
        FitGroups::new(BetaOutcomes::new(None).unwrap())
    }

    fn dirichlet() -> FitGroups<DirichletClasses> {
        let prior = DirichletPrior::new(vec!["a".into(), "b".into()], vec![1.0, 1.0]).unwrap();
        let p =
            AnyPosterior::Dirichlet(DirichletPosterior::from_parts(prior, vec![0.0, 0.0]).unwrap());
        FitGroups::new(DirichletClasses::new(Some(p)).unwrap())
    }

    fn evidence(p: &[Option<AnyPosterior>]) -> Vec<f64> {
        p.iter().map(|p| p.as_ref().unwrap().evidence()).collect()
    }

    #[test]
    fn emits_the_first_groups_then_the_rest() {
        let mut g = beta();
        let y: ArrayRef = Arc::new(Int64Array::from(vec![1, 0, 1, 1, 0]));
        g.update_batch(&[y], &[0, 1, 2, 2, 0], None, 3).unwrap();
        let first = posteriors(&g.evaluate(EmitTo::First(2)).unwrap());
        assert_eq!(evidence(&first), [2.0, 1.0]);
        let rest = posteriors(&g.evaluate(EmitTo::All).unwrap());
        assert_eq!(evidence(&rest), [2.0]);
    }

    #[test]
    fn states_round_trip_and_null_rows_are_ignored() {
        let y: ArrayRef = Arc::new(Int64Array::from(vec![Some(1), None, Some(0), Some(1)]));
        let groups = [0, 0, 1, 1];
        let mut direct = beta();
        direct
            .update_batch(std::slice::from_ref(&y), &groups, None, 2)
            .unwrap();
        // Partial states of two halves merged in the other order.
        let (mut a, mut b) = (beta(), beta());
        a.update_batch(&[y.slice(0, 2)], &groups[..2], None, 2)
            .unwrap();
        b.update_batch(&[y.slice(2, 2)], &groups[2..], None, 2)
            .unwrap();
        let mut merged = beta();
        merged
            .merge_batch(&b.state(EmitTo::All).unwrap(), &[0, 1], 2)
            .unwrap();
        merged
            .merge_batch(&a.state(EmitTo::All).unwrap(), &[0, 1], 2)
            .unwrap();
        // Rows turned straight into states (the engine's skip of partial aggregation).
        let mut converted = beta();
        let states = direct
            .convert_to_state(std::slice::from_ref(&y), None)
            .unwrap();
        converted.merge_batch(&states, &groups, 2).unwrap();
        let want = posteriors(&direct.evaluate(EmitTo::All).unwrap());
        assert_eq!(evidence(&want), [1.0, 2.0], "the NULL row is ignored");
        assert_eq!(posteriors(&merged.evaluate(EmitTo::All).unwrap()), want);
        assert_eq!(posteriors(&converted.evaluate(EmitTo::All).unwrap()), want);
    }

    #[test]
    fn dirichlet_states_travel_as_lists() {
        let class: ArrayRef = Arc::new(StringArray::from(vec![
            Some("a"),
            None,
            Some("b"),
            Some("b"),
        ]));
        let mut direct = dirichlet();
        direct
            .update_batch(std::slice::from_ref(&class), &[0, 0, 0, 1], None, 2)
            .unwrap();
        let state = direct.state(EmitTo::All).unwrap();
        assert_eq!(state.len(), 1);
        let mut merged = dirichlet();
        merged.merge_batch(&state, &[0, 1], 2).unwrap();
        let got = posteriors(&merged.evaluate(EmitTo::All).unwrap());
        assert_eq!(evidence(&got), [2.0, 1.0]);
    }
}
