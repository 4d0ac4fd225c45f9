//! How the table and its scan travel between the client, the scheduler and the
//! executors: Ballista's own codecs, with [`RowTable`] and [`RowScanExec`] added as plain
//! JSON behind a tag. Every process of a cluster (the client, `scheduler`, `executor`)
//! is configured with these two codecs.

use std::sync::Arc;

use ballista_core::serde::{BallistaLogicalExtensionCodec, BallistaPhysicalExtensionCodec};
use datafusion::arrow::datatypes::SchemaRef;
use datafusion::catalog::TableProvider;
use datafusion::common::{DataFusionError, Result, TableReference};
use datafusion::datasource::file_format::FileFormatFactory;
use datafusion::execution::TaskContext;
use datafusion::logical_expr::{AggregateUDF, Extension, LogicalPlan, ScalarUDF};
use datafusion::physical_plan::ExecutionPlan;
use datafusion_proto::logical_plan::LogicalExtensionCodec;
use datafusion_proto::physical_plan::{PhysicalExtensionCodec, PhysicalProtoConverterExtension};
use serde::{Deserialize, Serialize};

use crate::files::Files;
use crate::scan::{RowScanExec, RowTable, ScanPlan};
use crate::shares::{PassesShare, Share, ShareAggregate, TallyShare};

/// Marks our nodes among Ballista's (whose encodings are protobuf messages, which never
/// start with these bytes).
const TAG: &[u8] = b"\0flipmend-fleet\0";

fn tagged<T: Serialize>(value: &T, buf: &mut Vec<u8>) -> Result<()> {
    buf.extend_from_slice(TAG);
    serde_json::to_writer(buf, value).map_err(|e| DataFusionError::Internal(e.to_string()))
}

fn untagged<'a, T: Deserialize<'a>>(buf: &'a [u8]) -> Option<Result<T>> {
    buf.strip_prefix(TAG).map(|rest| {
        serde_json::from_slice(rest).map_err(|e| DataFusionError::Internal(e.to_string()))
    })
}

/// Our aggregate named `name` with the job `buf`, when it is one of ours.
fn our_aggregate(name: &str, buf: &[u8]) -> Option<Arc<AggregateUDF>> {
    if buf.is_empty() {
        return None;
    }
    let udf = match name {
        n if n == PassesShare::NAME => {
            AggregateUDF::from(ShareAggregate::<PassesShare>::with_job(buf))
        }
        n if n == TallyShare::NAME => {
            AggregateUDF::from(ShareAggregate::<TallyShare>::with_job(buf))
        }
        _ => return None,
    };
    Some(Arc::new(udf))
}

/// The job of our aggregate `node`, when it is one of ours.
fn aggregate_job(node: &AggregateUDF) -> Option<&[u8]> {
    let inner: &dyn std::any::Any = node.inner().as_ref();
    if let Some(f) = inner.downcast_ref::<ShareAggregate<PassesShare>>() {
        return Some(f.job());
    }
    inner
        .downcast_ref::<ShareAggregate<TallyShare>>()
        .map(|f| f.job())
}

/// Decodes our aggregate `name` with its job `buf`, or leaves it to `other`.
fn decode_udaf(
    name: &str,
    buf: &[u8],
    other: impl FnOnce() -> Result<Arc<AggregateUDF>>,
) -> Result<Arc<AggregateUDF>> {
    our_aggregate(name, buf).map_or_else(other, Ok)
}

/// Writes the job of our aggregate `node` into `buf`, or leaves it to `other`.
fn encode_udaf(
    node: &AggregateUDF,
    buf: &mut Vec<u8>,
    other: impl FnOnce(&mut Vec<u8>) -> Result<()>,
) -> Result<()> {
    match aggregate_job(node) {
        Some(job) => {
            buf.extend_from_slice(job);
            Ok(())
        }
        None => other(buf),
    }
}

/// Ballista's logical codec, knowing [`RowTable`].
#[derive(Debug, Default)]
pub struct LogicalCodec {
    inner: BallistaLogicalExtensionCodec,
}

impl LogicalExtensionCodec for LogicalCodec {
    fn try_decode(
        &self,
        buf: &[u8],
        inputs: &[LogicalPlan],
        ctx: &TaskContext,
    ) -> Result<Extension> {
        self.inner.try_decode(buf, inputs, ctx)
    }

    fn try_encode(&self, node: &Extension, buf: &mut Vec<u8>) -> Result<()> {
        self.inner.try_encode(node, buf)
    }

    fn try_decode_table_provider(
        &self,
        buf: &[u8],
        table_ref: &TableReference,
        schema: SchemaRef,
        ctx: &TaskContext,
    ) -> Result<Arc<dyn TableProvider>> {
        match untagged::<Files>(buf) {
            Some(files) => Ok(Arc::new(RowTable::with_schema(files?, schema))),
            None => self
                .inner
                .try_decode_table_provider(buf, table_ref, schema, ctx),
        }
    }

    fn try_encode_table_provider(
        &self,
        table_ref: &TableReference,
        node: Arc<dyn TableProvider>,
        buf: &mut Vec<u8>,
    ) -> Result<()> {
        let any: &dyn std::any::Any = node.as_ref();
        match any.downcast_ref::<RowTable>() {
            Some(table) => tagged(table.files(), buf),
            None => self.inner.try_encode_table_provider(table_ref, node, buf),
        }
    }

    fn try_decode_file_format(
        &self,
        buf: &[u8],
        ctx: &TaskContext,
    ) -> Result<Arc<dyn FileFormatFactory>> {
        self.inner.try_decode_file_format(buf, ctx)
    }

    fn try_encode_file_format(
        &self,
        buf: &mut Vec<u8>,
        node: Arc<dyn FileFormatFactory>,
    ) -> Result<()> {
        self.inner.try_encode_file_format(buf, node)
    }

    fn try_decode_udf(&self, name: &str, buf: &[u8]) -> Result<Arc<ScalarUDF>> {
        self.inner.try_decode_udf(name, buf)
    }

    fn try_decode_udaf(&self, name: &str, buf: &[u8]) -> Result<Arc<AggregateUDF>> {
        decode_udaf(name, buf, || self.inner.try_decode_udaf(name, buf))
    }

    fn try_encode_udaf(&self, node: &AggregateUDF, buf: &mut Vec<u8>) -> Result<()> {
        encode_udaf(node, buf, |buf| self.inner.try_encode_udaf(node, buf))
    }
}

/// Ballista's physical codec, knowing [`RowScanExec`].
#[derive(Debug, Default)]
pub struct PhysicalCodec {
    inner: BallistaPhysicalExtensionCodec,
}

impl PhysicalExtensionCodec for PhysicalCodec {
    fn try_decode(
        &self,
        buf: &[u8],
        inputs: &[Arc<dyn ExecutionPlan>],
        ctx: &TaskContext,
        proto_converter: &dyn PhysicalProtoConverterExtension,
    ) -> Result<Arc<dyn ExecutionPlan>> {
        match untagged::<ScanPlan>(buf) {
            Some(plan) => {
                let input = inputs.first().cloned().ok_or_else(|| {
                    DataFusionError::Internal("RowScanExec arrived without its input".into())
                })?;
                Ok(Arc::new(RowScanExec::from_plan(input, plan?)?))
            }
            None => self.inner.try_decode(buf, inputs, ctx, proto_converter),
        }
    }

    fn try_encode(
        &self,
        node: Arc<dyn ExecutionPlan>,
        buf: &mut Vec<u8>,
        proto_converter: &dyn PhysicalProtoConverterExtension,
    ) -> Result<()> {
        match node.downcast_ref::<RowScanExec>() {
            Some(scan) => tagged(scan.plan(), buf),
            None => self.inner.try_encode(node, buf, proto_converter),
        }
    }

    fn try_decode_udf(&self, name: &str, buf: &[u8]) -> Result<Arc<ScalarUDF>> {
        self.inner.try_decode_udf(name, buf)
    }

    fn try_decode_udaf(&self, name: &str, buf: &[u8]) -> Result<Arc<AggregateUDF>> {
        decode_udaf(name, buf, || self.inner.try_decode_udaf(name, buf))
    }

    fn try_encode_udaf(&self, node: &AggregateUDF, buf: &mut Vec<u8>) -> Result<()> {
        encode_udaf(node, buf, |buf| self.inner.try_encode_udaf(node, buf))
    }
}
