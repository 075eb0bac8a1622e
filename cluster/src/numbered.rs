//! encode's numbered rows on the wire ([`posterity::numbered`]).
//!
//! The client counts each scan part's rows once; the scheduler plans scans of the
//! same table, and executors run them. Both plan forms travel: the table (the source
//! table, the parts it is scanned in, each part's first row number) in logical
//! plans from client to scheduler, the scan (the source scan, which columns, the
//! first numbers) in physical plans from scheduler to executors. Either is a magic
//! prefix, a few integers, and the source's own plan encoded by the engine.

use std::sync::Arc;

use datafusion::catalog::TableProvider;
use datafusion::common::{DataFusionError, Result};
use datafusion::datasource::{provider_as_source, source_as_provider};
use datafusion::execution::TaskContext;
use datafusion::logical_expr::{LogicalPlan, LogicalPlanBuilder};
use datafusion::physical_plan::ExecutionPlan;
use datafusion_proto::logical_plan::{AsLogicalPlan, LogicalExtensionCodec};
use datafusion_proto::physical_plan::{AsExecutionPlan, PhysicalExtensionCodec};
use datafusion_proto::protobuf::{LogicalPlanNode, PhysicalPlanNode};
use posterity::numbered::{NumberedScan, NumberedTable};
use prost::Message;

/// Starts every encoded table or scan; no protobuf message begins with 0xff 0xff
/// (a field number that large is not valid), so the codecs cannot mistake one.
const TABLE_MAGIC: &[u8] = b"\xff\xffposterity-numbered-table-1";
const SCAN_MAGIC: &[u8] = b"\xff\xffposterity-numbered-scan-1";

fn malformed(what: &str) -> DataFusionError {
    DataFusionError::Internal(format!("posterity codec: malformed numbered {what}"))
}

/// Little-endian integers behind a magic prefix, then the rest as bytes.
struct Writer(Vec<u8>);

impl Writer {
    fn new(magic: &[u8]) -> Self {
        Writer(magic.to_vec())
    }
    fn int(&mut self, v: i64) {
        self.0.extend_from_slice(&v.to_le_bytes());
    }
    fn ints(&mut self, vs: impl ExactSizeIterator<Item = i64>) {
        self.int(vs.len() as i64);
        for v in vs {
            self.int(v);
        }
    }
}

struct Reader<'a> {
    rest: &'a [u8],
    what: &'static str,
}

impl<'a> Reader<'a> {
    /// `None` when `buf` is not one of ours.
    fn new(buf: &'a [u8], magic: &[u8], what: &'static str) -> Option<Self> {
        buf.strip_prefix(magic).map(|rest| Reader { rest, what })
    }
    fn int(&mut self) -> Result<i64> {
        let (head, rest) = self
            .rest
            .split_first_chunk::<8>()
            .ok_or_else(|| malformed(self.what))?;
        self.rest = rest;
        Ok(i64::from_le_bytes(*head))
    }
    fn ints(&mut self) -> Result<Vec<i64>> {
        let n = self.int()?;
        if n < 0 || n as usize > self.rest.len() / 8 {
            return Err(malformed(self.what));
        }
        (0..n).map(|_| self.int()).collect()
    }
}

/// `node` written if it is a numbered table; `Ok(false)` otherwise.
pub fn encode_table(
    node: &Arc<dyn TableProvider>,
    codec: &dyn LogicalExtensionCodec,
    buf: &mut Vec<u8>,
) -> Result<bool> {
    let Some(table) = node.downcast_ref::<NumberedTable>() else {
        return Ok(false);
    };
    let scan =
        LogicalPlanBuilder::scan("source", provider_as_source(table.source().clone()), None)?
            .build()?;
    let source = LogicalPlanNode::try_from_logical_plan(&scan, codec)?;
    let mut w = Writer::new(TABLE_MAGIC);
    w.int(table.parts() as i64);
    w.ints(table.starts().iter().copied());
    w.0.extend(source.encode_to_vec());
    buf.extend(w.0);
    Ok(true)
}

/// The numbered table in `buf`, or `None` if `buf` holds something else.
pub fn decode_table(
    buf: &[u8],
    ctx: &TaskContext,
    codec: &dyn LogicalExtensionCodec,
) -> Result<Option<Arc<dyn TableProvider>>> {
    let Some(mut r) = Reader::new(buf, TABLE_MAGIC, "table") else {
        return Ok(None);
    };
    let parts = r.int()?;
    let starts = r.ints()?;
    let node = LogicalPlanNode::decode(r.rest).map_err(|_| malformed("table"))?;
    let LogicalPlan::TableScan(scan) = node.try_into_logical_plan(ctx, codec)? else {
        return Err(malformed("table"));
    };
    let source = source_as_provider(&scan.source)?;
    let parts = usize::try_from(parts).map_err(|_| malformed("table"))?;
    // The scheduler splits a stage's work into tasks only for scans it knows, and
    // gives every task all the parts of any other: read this one as one part.
    Ok(Some(Arc::new(
        NumberedTable::new(source, starts, parts).serial(),
    )))
}

/// `node` written if it is a numbered scan; `Ok(false)` otherwise.
pub fn encode_scan(
    node: &Arc<dyn ExecutionPlan>,
    codec: &dyn PhysicalExtensionCodec,
    buf: &mut Vec<u8>,
) -> Result<bool> {
    let Some(scan) = node.downcast_ref::<NumberedScan>() else {
        return Ok(false);
    };
    let inner = PhysicalPlanNode::try_from_physical_plan(scan.inner().clone(), codec)?;
    let mut w = Writer::new(SCAN_MAGIC);
    w.int(i64::from(scan.serial()));
    w.ints(scan.starts().iter().copied());
    w.ints(scan.sources().iter().map(|s| s.map_or(-1, |i| i as i64)));
    w.0.extend(inner.encode_to_vec());
    buf.extend(w.0);
    Ok(true)
}

/// The numbered scan in `buf`, or `None` if `buf` holds something else.
pub fn decode_scan(
    buf: &[u8],
    ctx: &TaskContext,
    codec: &dyn PhysicalExtensionCodec,
) -> Result<Option<Arc<dyn ExecutionPlan>>> {
    let Some(mut r) = Reader::new(buf, SCAN_MAGIC, "scan") else {
        return Ok(None);
    };
    let serial = r.int()? != 0;
    let starts = r.ints()?;
    let sources: Vec<Option<usize>> = r
        .ints()?
        .into_iter()
        .map(|s| usize::try_from(s).ok())
        .collect();
    let node = PhysicalPlanNode::decode(r.rest).map_err(|_| malformed("scan"))?;
    let inner = node.try_into_physical_plan(ctx, codec)?;
    let columns = inner.schema().fields().len();
    if sources.iter().flatten().any(|&i: &usize| i >= columns) {
        return Err(malformed("scan"));
    }
    Ok(Some(Arc::new(NumberedScan::new(
        inner, sources, starts, serial,
    ))))
}
