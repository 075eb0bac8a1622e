//! `posterior_pool(p)`: the sum of evidence of posteriors sharing a prior. It
//! works on any family, keeping one posterior per group; its partial state is a
//! posterior column itself, so pools of pools merge exactly.

use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, BooleanArray};
use datafusion::arrow::datatypes::{DataType, Field, FieldRef};
use datafusion::common::{Result, ScalarValue};
use datafusion::logical_expr::function::{AccumulatorArgs, StateFieldsArgs};
use datafusion::logical_expr::{
    Accumulator, AggregateUDFImpl, Documentation, EmitTo, GroupsAccumulator, Signature, Volatility,
};

use crate::fit::family_error;
use crate::layout::{build, AnyPosterior, Combine, Kind, PosteriorColumn};

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
        Ok(Box::new(PoolAccumulator(PoolGroups::new(
            args.return_type(),
        )?)))
    }

    fn state_fields(&self, args: StateFieldsArgs) -> Result<Vec<FieldRef>> {
        Ok(vec![Arc::new(Field::new(
            format!("{}[pooled]", args.name),
            args.return_type().clone(),
            true,
        ))])
    }

    fn groups_accumulator_supported(&self, _args: AccumulatorArgs) -> bool {
        true
    }

    fn create_groups_accumulator(
        &self,
        args: AccumulatorArgs,
    ) -> Result<Box<dyn GroupsAccumulator>> {
        Ok(Box::new(PoolGroups::new(args.return_type())?))
    }

    fn documentation(&self) -> Option<&Documentation> {
        crate::docs::get(NAME)
    }
}

/// One optional posterior per group.
#[derive(Debug)]
struct PoolGroups {
    kind: Kind,
    pooled: Vec<Option<AnyPosterior>>,
}

impl PoolGroups {
    fn new(t: &DataType) -> Result<Self> {
        Ok(PoolGroups {
            kind: Kind::expect(NAME, "p", t)?,
            pooled: Vec::new(),
        })
    }

    fn add(
        &mut self,
        values: &ArrayRef,
        groups: &[usize],
        filter: Option<&BooleanArray>,
        total: usize,
    ) -> Result<()> {
        if self.pooled.len() < total {
            self.pooled.resize(total, None);
        }
        let column = PosteriorColumn::new(NAME, values)?;
        for (i, &g) in groups.iter().enumerate() {
            if filter.is_some_and(|f| !f.is_valid(i) || !f.value(i)) {
                continue;
            }
            let Some(p) = column.get(i).map_err(|e| family_error(NAME, e))? else {
                continue;
            };
            self.pooled[g] = Some(match self.pooled[g].take() {
                None => p,
                Some(acc) => acc
                    .combine(&p, Combine::Merge)
                    .map_err(|e| family_error(NAME, e))?,
            });
        }
        Ok(())
    }

    fn emit(&mut self, emit_to: EmitTo) -> Result<ArrayRef> {
        let rows = emit_to.take_needed(&mut self.pooled);
        build(self.kind, &rows)
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
        self.add(&values[0], groups, filter, total)
    }

    fn evaluate(&mut self, emit_to: EmitTo) -> Result<ArrayRef> {
        self.emit(emit_to)
    }

    fn state(&mut self, emit_to: EmitTo) -> Result<Vec<ArrayRef>> {
        Ok(vec![self.emit(emit_to)?])
    }

    fn merge_batch(&mut self, values: &[ArrayRef], groups: &[usize], total: usize) -> Result<()> {
        self.add(&values[0], groups, None, total)
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
        fresh.add(&values[0], &(0..rows).collect::<Vec<_>>(), opt_filter, rows)?;
        Ok(vec![fresh.emit(EmitTo::All)?])
    }

    fn size(&self) -> usize {
        self.pooled.capacity() * std::mem::size_of::<Option<AnyPosterior>>()
    }
}

#[derive(Debug)]
struct PoolAccumulator(PoolGroups);

impl Accumulator for PoolAccumulator {
    fn update_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        let n = values[0].len();
        self.0.add(&values[0], &vec![0; n], None, 1)
    }

    fn evaluate(&mut self) -> Result<ScalarValue> {
        if self.0.pooled.is_empty() {
            self.0.pooled.push(None);
        }
        let rows = self.0.pooled.clone();
        ScalarValue::try_from_array(&build(self.0.kind, &rows)?, 0)
    }

    fn size(&self) -> usize {
        self.0.size()
    }

    fn state(&mut self) -> Result<Vec<ScalarValue>> {
        Ok(vec![self.evaluate()?])
    }

    fn merge_batch(&mut self, states: &[ArrayRef]) -> Result<()> {
        self.update_batch(states)
    }
}
