//! `posterior_pool(p)`: the sum of evidence of posteriors sharing a prior. It
//! works on any family. Each group keeps its prior (the first posterior seen) and
//! the evidence as compensated sums (`Conjugate::evidence_sums`), which travel
//! between partitions beside the rounded posterior, so the result does not depend
//! on the order in which rows and partial states arrive (thread count,
//! partitioning), like the fit aggregates'.

use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, AsArray, BooleanArray, ListArray};
use datafusion::arrow::datatypes::{DataType, Field, FieldRef, Float64Type};
use datafusion::common::{exec_err, Result, ScalarValue};
use datafusion::logical_expr::function::{AccumulatorArgs, StateFieldsArgs};
use datafusion::logical_expr::{
    Accumulator, AggregateUDFImpl, Documentation, EmitTo, GroupsAccumulator, Signature, Volatility,
};

use crate::family::compensated::Dd;
use crate::fit::family_error;
use crate::layout::{build, AnyPosterior, Kind, PosteriorColumn};

const NAME: &str = "posterior_pool";

#[derive(Debug, PartialEq, Eq, Hash)]
pub struct PosteriorPool {
    signature: Signature,
}

impl Default for PosteriorPool {
    fn default() -> Self {
        PosteriorPool {
            signature: Signature::user_defined(Volatility::Immutable),
        }
    }
}

impl AggregateUDFImpl for PosteriorPool {
    fn name(&self) -> &str {
        NAME
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn coerce_types(&self, t: &[DataType]) -> Result<Vec<DataType>> {
        if t.len() != 1 {
            return datafusion::common::plan_err!(
                "{NAME}: takes 1 argument, got {}; usage: posterior_pool(p)",
                t.len()
            );
        }
        Ok(vec![Kind::expect(NAME, "p", &t[0])?.data_type()])
    }

    fn return_type(&self, t: &[DataType]) -> Result<DataType> {
        Ok(Kind::expect(NAME, "p", &t[0])?.data_type())
    }

    fn accumulator(&self, args: AccumulatorArgs) -> Result<Box<dyn Accumulator>> {
        crate::distinct::refuse(NAME, args.is_distinct)?;
        Ok(Box::new(PoolAccumulator(PoolGroups::new(
            args.return_type(),
        )?)))
    }

    fn state_fields(&self, args: StateFieldsArgs) -> Result<Vec<FieldRef>> {
        Ok(vec![
            Arc::new(Field::new(
                format!("{}[pooled]", args.name),
                args.return_type().clone(),
                true,
            )),
            Arc::new(Field::new(
                format!("{}[sums]", args.name),
                DataType::List(Arc::new(Field::new_list_field(DataType::Float64, true))),
                true,
            )),
        ])
    }

    fn groups_accumulator_supported(&self, _args: AccumulatorArgs) -> bool {
        true
    }

    fn create_groups_accumulator(
        &self,
        args: AccumulatorArgs,
    ) -> Result<Box<dyn GroupsAccumulator>> {
        crate::distinct::refuse(NAME, args.is_distinct)?;
        Ok(Box::new(PoolGroups::new(args.return_type())?))
    }

    fn documentation(&self) -> Option<&Documentation> {
        crate::docs::get(NAME)
    }
}

/// One group's pool: the prior (a posterior of the first row), the evidence as
/// `[hi, lo]` slot pairs of compensated sums, and how many inputs it holds (a
/// sliding window frame that retracts them all is empty again).
#[derive(Debug, Clone)]
pub(crate) struct Pooled {
    prior: AnyPosterior,
    sums: Vec<f64>,
    inputs: u64,
}

impl Pooled {
    /// Add (or with `retract`, remove) the evidence `sums` of a posterior with
    /// `p`'s prior; a pool left with no inputs is emptied. `function` names the SQL
    /// function in errors.
    pub(crate) fn add(
        function: &str,
        slot: &mut Option<Pooled>,
        p: &AnyPosterior,
        sums: &[Dd],
        retract: bool,
    ) -> Result<()> {
        let pooled = match slot {
            Some(pooled) => {
                pooled
                    .prior
                    .same_prior(p)
                    .map_err(|e| family_error(function, e))?;
                pooled
            }
            None if retract => {
                return exec_err!("{function}: a window frame removed an input it never had")
            }
            None => slot.insert(Pooled {
                prior: p.clone(),
                sums: vec![0.0; 2 * sums.len()],
                inputs: 0,
            }),
        };
        if pooled.sums.len() != 2 * sums.len() {
            return exec_err!("{function}: posteriors with different numbers of classes");
        }
        for (slot, s) in pooled.sums.chunks_exact_mut(2).zip(sums) {
            Dd::accumulate_dd(slot, if retract { -*s } else { *s });
        }
        if !retract {
            pooled.inputs += 1;
        } else {
            pooled.inputs -= 1;
            if pooled.inputs == 0 {
                *slot = None;
            }
        }
        Ok(())
    }

    pub(crate) fn posterior(&self) -> AnyPosterior {
        let sums: Vec<Dd> = self.sums.chunks_exact(2).map(Dd::from_slot).collect();
        self.prior.with_evidence_sums(&sums)
    }
}

/// One optional pool per group.
#[derive(Debug)]
struct PoolGroups {
    kind: Kind,
    pooled: Vec<Option<Pooled>>,
}

impl PoolGroups {
    fn new(t: &DataType) -> Result<Self> {
        Ok(PoolGroups {
            kind: Kind::expect(NAME, "p", t)?,
            pooled: Vec::new(),
        })
    }

    /// Add a column of posteriors, or with `sums`, of partial states (the pooled
    /// posterior carries the prior, `sums` the compensated evidence); with
    /// `retract`, remove them (a sliding window frame).
    fn add(
        &mut self,
        (values, sums): (&ArrayRef, Option<&ArrayRef>),
        groups: &[usize],
        filter: Option<&BooleanArray>,
        total: usize,
        retract: bool,
    ) -> Result<()> {
        if self.pooled.len() < total {
            self.pooled.resize(total, None);
        }
        let column = PosteriorColumn::new(NAME, values)?;
        let sums = sums.map(|s| s.as_list::<i32>());
        for (i, &g) in groups.iter().enumerate() {
            if filter.is_some_and(|f| !f.is_valid(i) || !f.value(i)) {
                continue;
            }
            let Some(p) = column.get(i).map_err(|e| family_error(NAME, e))? else {
                continue;
            };
            let evidence = match sums {
                Some(list) if !list.is_null(i) => {
                    let row = list.value(i);
                    let slots = row.as_primitive::<Float64Type>().values();
                    slots.chunks_exact(2).map(Dd::from_slot).collect()
                }
                _ => p.evidence_sums(),
            };
            Pooled::add(NAME, &mut self.pooled[g], &p, &evidence, retract)?;
        }
        Ok(())
    }

    fn take(&mut self, emit_to: EmitTo) -> Vec<Option<Pooled>> {
        emit_to.take_needed(&mut self.pooled)
    }

    fn posteriors(&self, rows: &[Option<Pooled>]) -> Result<ArrayRef> {
        let posteriors: Vec<Option<AnyPosterior>> = rows
            .iter()
            .map(|r| r.as_ref().map(Pooled::posterior))
            .collect();
        build(NAME, self.kind, &posteriors)
    }

    /// The partial state of `rows`: pooled posteriors and their compensated sums.
    fn state_of(&self, rows: &[Option<Pooled>]) -> Result<Vec<ArrayRef>> {
        let sums = ListArray::from_iter_primitive::<Float64Type, _, _>(rows.iter().map(|r| {
            r.as_ref()
                .map(|p| p.sums.iter().map(|&v| Some(v)).collect::<Vec<_>>())
        }));
        Ok(vec![self.posteriors(rows)?, Arc::new(sums)])
    }
}

impl GroupsAccumulator for PoolGroups {
    fn update_batch(
        &mut self,
        values: &[ArrayRef],
        groups: &[usize],
        filter: Option<&BooleanArray>,
        total: usize,
    ) -> Result<()> {
        self.add((&values[0], None), groups, filter, total, false)
    }

    fn evaluate(&mut self, emit_to: EmitTo) -> Result<ArrayRef> {
        let rows = self.take(emit_to);
        self.posteriors(&rows)
    }

    fn state(&mut self, emit_to: EmitTo) -> Result<Vec<ArrayRef>> {
        let rows = self.take(emit_to);
        self.state_of(&rows)
    }

    fn merge_batch(&mut self, values: &[ArrayRef], groups: &[usize], total: usize) -> Result<()> {
        self.add((&values[0], values.get(1)), groups, None, total, false)
    }

    fn convert_to_state(
        &self,
        values: &[ArrayRef],
        opt_filter: Option<&BooleanArray>,
    ) -> Result<Vec<ArrayRef>> {
        let rows = values[0].len();
        let mut fresh = PoolGroups {
            kind: self.kind,
            pooled: Vec::new(),
        };
        let groups: Vec<usize> = (0..rows).collect();
        fresh.add((&values[0], None), &groups, opt_filter, rows, false)?;
        self.state_of(&fresh.pooled)
    }

    fn size(&self) -> usize {
        self.pooled.capacity() * std::mem::size_of::<Option<Pooled>>()
            + self
                .pooled
                .iter()
                .flatten()
                .map(|p| p.sums.capacity() * 8)
                .sum::<usize>()
    }
}

/// One pool (a window frame, or a query without GROUP BY).
#[derive(Debug)]
struct PoolAccumulator(PoolGroups);

impl PoolAccumulator {
    fn one(&self) -> Vec<Option<Pooled>> {
        vec![self.0.pooled.first().cloned().flatten()]
    }
}

impl Accumulator for PoolAccumulator {
    fn update_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        let n = values[0].len();
        self.0.add((&values[0], None), &vec![0; n], None, 1, false)
    }

    fn retract_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        let n = values[0].len();
        self.0.add((&values[0], None), &vec![0; n], None, 1, true)
    }

    fn supports_retract_batch(&self) -> bool {
        true
    }

    fn evaluate(&mut self) -> Result<ScalarValue> {
        let pooled = self.0.pooled.first().and_then(Option::as_ref);
        let column = build(NAME, self.0.kind, &[pooled.map(Pooled::posterior)])?;
        Ok(crate::layout::one_row_scalar(&column))
    }

    fn size(&self) -> usize {
        self.0.size()
    }

    fn state(&mut self) -> Result<Vec<ScalarValue>> {
        self.0
            .state_of(&self.one())?
            .iter()
            .map(|a| ScalarValue::try_from_array(a, 0))
            .collect()
    }

    fn merge_batch(&mut self, states: &[ArrayRef]) -> Result<()> {
        let n = states[0].len();
        self.0
            .add((&states[0], states.get(1)), &vec![0; n], None, 1, false)
    }
}
