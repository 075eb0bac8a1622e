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
use std::sync::Arc;

use datafusion::arrow::array::{make_comparator, Array, ArrayRef, AsArray, DynComparator};
use datafusion::arrow::compute::SortOptions;
use datafusion::arrow::datatypes::{DataType, Field, FieldRef, Float64Type};
use datafusion::common::{exec_err, plan_err, Result};
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
    /// at the OVER clause (`simplify`) is not forwarded; the display name the planner
    /// gives `field` is, and it ends with the frame (see `frame_in_name`).
    frame_from_name: bool,
}

impl Default for PosteriorPoolBefore {
    fn default() -> Self {
        PosteriorPoolBefore {
            signature: Signature::user_defined(Volatility::Immutable),
            frame_from_name: false,
        }
    }
}

impl PosteriorPoolBefore {
    /// For an engine reached through the foreign-function interface: the frame is
    /// read from the window expression's display name.
    pub fn for_foreign_engine() -> Self {
        PosteriorPoolBefore {
            frame_from_name: true,
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
        }))
    }

    fn field(&self, args: WindowUDFFieldArgs) -> Result<FieldRef> {
        let Some(p) = args.get_input_field(0) else {
            return Err(arity_error(NAME, 0, 2, 3, None));
        };
        if self.frame_from_name {
            if let Some(frame) = frame_in_name(args.name()).filter(|f| !is_default_frame_text(f)) {
                return plan_err!(
                    "{NAME}: the OVER clause has a window frame ({frame}); {LEAVE_IT_OUT}"
                );
            }
        }
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
        if self.frame_from_name {
            // Checked in `field` (an interface would not forward this).
            return None;
        }
        Some(Box::new(|w: WindowFunction, _| {
            if !is_default_frame(&w.params.window_frame) {
                return plan_err!(
                    "{NAME}: the OVER clause has a window frame ({}); {LEAVE_IT_OUT}",
                    w.params.window_frame
                );
            }
            Ok(Expr::from(w))
        }))
    }
}

const LEAVE_IT_OUT: &str = "leave it out: the rows each pool reads follow from t and gap";

/// The frame at the end of a window expression's display name, which the engine
/// always writes last: `... ORDER BY [t ASC NULLS LAST] RANGE BETWEEN UNBOUNDED
/// PRECEDING AND CURRENT ROW`. `None` for a name without one.
fn frame_in_name(name: &str) -> Option<&str> {
    let start = ["ROWS", "RANGE", "GROUPS"]
        .iter()
        .filter_map(|units| name.rfind(&format!(" {units} BETWEEN ")))
        .max()?;
    let frame = &name[start + 1..];
    [" PRECEDING", " FOLLOWING", " CURRENT ROW"]
        .iter()
        .any(|end| frame.ends_with(end))
        .then_some(frame)
}

/// Whether a frame written as the engine writes it is one `is_default_frame` allows.
fn is_default_frame_text(frame: &str) -> bool {
    let Some((_, bounds)) = frame.split_once(" BETWEEN ") else {
        return false;
    };
    bounds
        .strip_prefix("UNBOUNDED PRECEDING AND ")
        .is_some_and(|end| {
            ["CURRENT ROW", "UNBOUNDED PRECEDING", "UNBOUNDED FOLLOWING"].contains(&end)
        })
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
