//! `posterior_pool_before(p, t [, gap]) OVER (PARTITION BY level ORDER BY t)`: each
//! row's pool of the posteriors of the partition's rows at strictly earlier times
//! (with a gap: at times at least `gap` earlier). It is what as-of encodings read.
//!
//! `posterior_pool` over a frame ending before the row gives the same posteriors, to
//! the bit, but the engine evaluates such a frame one row at a time: it slices each
//! row's input and collects each row's result. This window function sees a whole
//! partition at once and walks it in one pass, adding each row's evidence to the
//! running compensated sums in the order the frame would.

use std::cmp::Ordering;
use std::ops::Range;
use std::sync::Arc;

use datafusion::arrow::array::{make_comparator, Array, ArrayRef, AsArray, DynComparator};
use datafusion::arrow::compute::SortOptions;
use datafusion::arrow::datatypes::{DataType, Field, FieldRef, Float64Type};
use datafusion::common::{exec_err, plan_err, Result, ScalarValue};
use datafusion::logical_expr::expr::WindowFunction;
use datafusion::logical_expr::function::{
    PartitionEvaluatorArgs, WindowFunctionSimplification, WindowUDFFieldArgs,
};
use datafusion::logical_expr::{
    Documentation, Expr, PartitionEvaluator, Signature, Volatility, WindowFrame, WindowFrameBound,
    WindowUDFImpl,
};

use crate::docs::{arity_error, check_arity};
use crate::family::number;
use crate::fit::{family_error, is_number};
use crate::layout::{build, describe_type, AnyPosterior, Kind, PosteriorColumn};
use crate::pool::Pooled;

const NAME: &str = "posterior_pool_before";
const USAGE: &str = "posterior_pool_before(p, t [, gap]) OVER (PARTITION BY ... ORDER BY t)";

#[derive(Debug, PartialEq, Eq, Hash)]
pub struct PosteriorPoolBefore {
    signature: Signature,
    /// Through DataFusion's foreign-function interface (Python) the planner's look
    /// at the OVER clause (`simplify`) is not forwarded; there the frame is checked
    /// as the query runs, from each row's range (see `RowByRow`).
    frame_per_row: bool,
}

impl Default for PosteriorPoolBefore {
    fn default() -> Self {
        PosteriorPoolBefore {
            signature: Signature::user_defined(Volatility::Immutable),
            frame_per_row: false,
        }
    }
}

impl PosteriorPoolBefore {
    /// For an engine reached through the foreign-function interface: a window frame
    /// is refused when the query runs instead of when it is planned.
    pub fn for_foreign_engine() -> Self {
        PosteriorPoolBefore {
            frame_per_row: true,
            ..Default::default()
        }
    }
}

impl WindowUDFImpl for PosteriorPoolBefore {
    fn name(&self) -> &str {
        NAME
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn coerce_types(&self, t: &[DataType]) -> Result<Vec<DataType>> {
        check_arity(NAME, t.len(), 2, 3)?;
        let p = Kind::expect(NAME, "p", &t[0])?.data_type();
        if t.len() == 2 {
            // Without a gap only the order of the times matters: any type.
            return Ok(vec![p, t[1].clone()]);
        }
        for (argument, ty) in [("t", &t[1]), ("gap", &t[2])] {
            if !is_number(ty) {
                return plan_err!(
                    "{NAME}: argument {argument} is {}; with a gap, the time and the gap \
                     must be numbers in one unit (for dates, days: a day number)",
                    describe_type(ty)
                );
            }
        }
        Ok(vec![p, DataType::Float64, DataType::Float64])
    }

    fn partition_evaluator(
        &self,
        args: PartitionEvaluatorArgs,
    ) -> Result<Box<dyn PartitionEvaluator>> {
        Ok(Box::new(PoolBeforeEvaluator {
            has_gap: args.input_exprs().len() == 3,
            frame_per_row: self.frame_per_row,
            rows: None,
        }))
    }

    fn field(&self, args: WindowUDFFieldArgs) -> Result<FieldRef> {
        let Some(p) = args.get_input_field(0) else {
            return Err(arity_error(NAME, 0, 2, 3, None));
        };
        Ok(Arc::new(Field::new(
            args.name(),
            p.data_type().clone(),
            true,
        )))
    }

    fn documentation(&self) -> Option<&Documentation> {
        crate::docs::get(NAME)
    }

    /// Not a simplification: the planner's one look at the OVER clause. The rows a
    /// pool reads follow from t and gap alone, so a frame the evaluator would not
    /// see is refused instead of silently ignored (the engine refuses FILTER).
    fn simplify(&self) -> Option<WindowFunctionSimplification> {
        if self.frame_per_row {
            // Checked as the query runs (the interface would not forward this).
            return None;
        }
        Some(Box::new(|w: WindowFunction, _| {
            if !is_default_frame(&w.params.window_frame) {
                return plan_err!(
                    "{NAME}: the OVER clause has a window frame ({}); leave it out: the rows \
                     each pool reads follow from t and gap",
                    w.params.window_frame
                );
            }
            Ok(Expr::from(w))
        }))
    }
}

/// The frame the engine gives an OVER clause without one: from the partition's
/// start to the current row (with ORDER BY) or to its end (without).
fn is_default_frame(frame: &WindowFrame) -> bool {
    let unbounded = |b: &WindowFrameBound| match b {
        WindowFrameBound::Preceding(v) | WindowFrameBound::Following(v) => v.is_null(),
        WindowFrameBound::CurrentRow => false,
    };
    let to_current_or_end = match &frame.end_bound {
        WindowFrameBound::CurrentRow => true,
        end => unbounded(end),
    };
    unbounded(&frame.start_bound) && to_current_or_end
}

#[derive(Debug)]
struct PoolBeforeEvaluator {
    has_gap: bool,
    frame_per_row: bool,
    /// With `frame_per_row`: the partition's pools, served one row at a time.
    rows: Option<RowByRow>,
}

/// A partition evaluated once and served row by row, as the engine asks when a
/// function reads its frame: each row's frame range is checked against the frames
/// the planner would let through (from the partition's start to the current row,
/// its peers or the partition's end).
#[derive(Debug)]
struct RowByRow {
    pools: ArrayRef,
    /// Per row, the end of its peers (rows equal in the ORDER BY columns).
    peers_end: Vec<usize>,
    next: usize,
}

impl RowByRow {
    fn new(pools: ArrayRef, order_by: &[ArrayRef]) -> Result<Self> {
        let n = pools.len();
        let mut peers_end = vec![n; n];
        if !order_by.is_empty() {
            for peers in datafusion::arrow::compute::partition(order_by)?.ranges() {
                peers_end[peers.clone()].fill(peers.end);
            }
        }
        Ok(RowByRow {
            pools,
            peers_end,
            next: 0,
        })
    }

    /// The next row's pool, when its frame `range` is one the planner allows.
    fn next(&mut self, range: &Range<usize>) -> Result<ScalarValue> {
        let (row, n) = (self.next, self.pools.len());
        self.next += 1;
        let allowed = range.start == 0 && [row + 1, self.peers_end[row], n].contains(&range.end);
        if !allowed {
            return exec_err!(
                "{NAME}: the OVER clause has a window frame (row {row} of its partition reads \
                 rows {} to {}); leave it out: the rows each pool reads follow from t and gap",
                range.start,
                range.end.saturating_sub(1)
            );
        }
        ScalarValue::try_from_array(&self.pools, row)
    }
}

impl PartitionEvaluator for PoolBeforeEvaluator {
    fn evaluate_all(&mut self, values: &[ArrayRef], num_rows: usize) -> Result<ArrayRef> {
        let column = PosteriorColumn::new(NAME, &values[0])?;
        let times = &values[1];
        let order = time_order(times)?;
        let mut pool = Running::new(&column, times, order);
        let out = match self.has_gap {
            false => pool.before_each_time(num_rows)?,
            true => pool.at_least_gap_before(gap(&values[2])?, num_rows)?,
        };
        build(NAME, column.kind(), &out)
    }

    fn uses_window_frame(&self) -> bool {
        self.frame_per_row
    }

    /// Row by row (only with `frame_per_row`): `values` are the arguments, then the
    /// ORDER BY columns; the partition is pooled at its first row.
    fn evaluate(&mut self, values: &[ArrayRef], range: &Range<usize>) -> Result<ScalarValue> {
        let arguments = if self.has_gap { 3 } else { 2 };
        let n = values.first().map_or(0, |v| v.len());
        let rows = match self.rows.take() {
            Some(rows) if rows.next < rows.pools.len() => rows,
            _ => RowByRow::new(
                self.evaluate_all(&values[..arguments.min(values.len())], n)?,
                values.get(arguments..).unwrap_or_default(),
            )?,
        };
        let rows = self.rows.insert(rows);
        rows.next(range)
    }
}

/// The pool of rows `0..next` of a partition, grown in row order.
struct Running<'a> {
    column: &'a PosteriorColumn,
    times: &'a ArrayRef,
    /// Compares two rows' times (checked ascending by `time_order`).
    order: DynComparator,
    pooled: Option<Pooled>,
    next: usize,
}

impl<'a> Running<'a> {
    fn new(column: &'a PosteriorColumn, times: &'a ArrayRef, order: DynComparator) -> Self {
        Running {
            column,
            times,
            order,
            pooled: None,
            next: 0,
        }
    }

    /// Add rows up to (not including) `end`; NULL posteriors and rows with a NULL
    /// time (not earlier than anything) add nothing.
    fn grow_to(&mut self, end: usize) -> Result<()> {
        while self.next < end {
            if self.times.is_null(self.next) {
                self.next += 1;
                continue;
            }
            if let Some(p) = self
                .column
                .get(self.next)
                .map_err(|e| family_error(NAME, e))?
            {
                Pooled::add(NAME, &mut self.pooled, &p, &p.evidence_sums(), false)?;
            }
            self.next += 1;
        }
        Ok(())
    }

    fn current(&self) -> Option<AnyPosterior> {
        self.pooled.as_ref().map(Pooled::posterior)
    }

    /// Without a gap: the rows of one time read every row of the earlier times. A
    /// NULL time reads nothing.
    fn before_each_time(&mut self, rows: usize) -> Result<Vec<Option<AnyPosterior>>> {
        let times = self.times;
        let mut out = Vec::with_capacity(rows);
        let mut start = 0;
        while start < rows {
            if times.is_null(start) {
                out.push(None);
                start += 1;
                continue;
            }
            let mut end = start + 1;
            while end < rows && !times.is_null(end) && (self.order)(start, end) == Ordering::Equal {
                end += 1;
            }
            self.grow_to(start)?;
            let pooled = self.current();
            out.resize(end, pooled);
            start = end;
        }
        Ok(out)
    }

    /// With a gap: a row at time t reads the rows at times up to t - gap.
    fn at_least_gap_before(&mut self, gap: f64, rows: usize) -> Result<Vec<Option<AnyPosterior>>> {
        let Some(times) = self.times.as_primitive_opt::<Float64Type>() else {
            return exec_err!("{NAME}: with a gap, argument t must be a number");
        };
        let mut out = Vec::with_capacity(rows);
        let mut end = 0;
        for i in 0..rows {
            if times.is_null(i) {
                out.push(None);
                continue;
            }
            let limit = times.value(i) - gap;
            while end < rows && (times.is_null(end) || times.value(end) <= limit) {
                end += 1;
            }
            self.grow_to(end)?;
            out.push(self.current());
        }
        Ok(out)
    }
}

/// The window must be ordered by `t`, ascending (NULLs first or last): otherwise
/// "earlier" means nothing and the pools would silently read later rows.
/// Returns the comparator of the times, for finding rows of one time.
fn time_order(times: &ArrayRef) -> Result<DynComparator> {
    if let Some(t) = times.as_primitive_opt::<Float64Type>() {
        if t.iter().any(|x| x.is_some_and(f64::is_nan)) {
            return exec_err!("{NAME}: argument t is NaN; times must be numbers or NULL");
        }
    }
    let order = make_comparator(times, times, SortOptions::default())?;
    let valid: Vec<usize> = (0..times.len()).filter(|&i| times.is_valid(i)).collect();
    let nulls_at_an_end = valid
        .first()
        .is_none_or(|&first| valid.len() == valid[valid.len() - 1] - first + 1);
    if !nulls_at_an_end
        || valid
            .windows(2)
            .any(|w| order(w[0], w[1]) == Ordering::Greater)
    {
        return exec_err!(
            "{NAME}: the window is not ordered by argument t; write it as {USAGE} (ascending)"
        );
    }
    Ok(order)
}

/// The gap: one finite number > 0 for the whole partition.
fn gap(values: &ArrayRef) -> Result<f64> {
    let Some(gaps) = values.as_primitive_opt::<Float64Type>() else {
        return exec_err!("{NAME}: argument gap must be a number");
    };
    let Some(first) = (0..gaps.len()).next() else {
        return Ok(1.0); // an empty partition reads nothing anyway
    };
    let g = if gaps.is_null(first) {
        f64::NAN
    } else {
        gaps.value(first)
    };
    if !(g.is_finite() && g > 0.0) {
        return exec_err!(
            "{NAME}: argument gap = {} is out of range; allowed: a finite number > 0",
            number(g)
        );
    }
    if (0..gaps.len()).any(|i| gaps.is_null(i) || gaps.value(i) != g) {
        return exec_err!("{NAME}: argument gap must be one number for every row (a constant)");
    }
    Ok(g)
}
