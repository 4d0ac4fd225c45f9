//! The table as the engine sees it: Parquet files in name order, read by row groups,
//! with a column `__row` holding each row's table row (its position in the files laid end
//! to end, as the single-machine run numbers them).
//!
//! DataFusion's own `file_row_index()` gives the position within a file, but Ballista 55
//! does not carry that virtual column to its executors (measured: the executor fails
//! with "Column index 2 out of bounds for projected expressions of length 2"), so the
//! scan is ours: an [`ExecutionPlan`] whose partitions are runs of row groups, which the
//! codec in [`crate::codec`] sends to executors as plain data. The runs themselves are an
//! in-memory table under it, because Ballista gives each task its share of a stage only
//! by cutting scans it knows (a leaf of our own was read whole by every task: measured,
//! 15,099 rows counted of 8,000).

use std::fmt;
use std::path::PathBuf;
use std::sync::Arc;

use async_trait::async_trait;
use datafusion::arrow::array::{ArrayRef, AsArray, RecordBatch, StringArray, UInt64Array};
use datafusion::arrow::datatypes::{DataType, Field, Schema, SchemaRef, UInt64Type};
use datafusion::catalog::{Session, TableProvider};
use datafusion::common::tree_node::TreeNodeRecursion;
use datafusion::common::{DataFusionError, Result};
use datafusion::datasource::memory::MemorySourceConfig;
use datafusion::datasource::TableType;
use datafusion::execution::{SendableRecordBatchStream, TaskContext};
use datafusion::logical_expr::Expr;
use datafusion::parquet::arrow::ProjectionMask;
use datafusion::physical_expr::{EquivalenceProperties, PhysicalExpr};
use datafusion::physical_plan::execution_plan::{Boundedness, EmissionType};
use datafusion::physical_plan::stream::RecordBatchStreamAdapter;
use datafusion::physical_plan::{
    DisplayAs, DisplayFormatType, ExecutionPlan, Partitioning, PlanProperties,
};
use futures::StreamExt;
use serde::{Deserialize, Serialize};

use crate::files::{file_schema, reader, with_row_column, Files, Piece};

/// Rows per batch the scan hands on.
const BATCH_ROWS: usize = 8192;

/// The table: the files' columns and `__row`.
#[derive(Debug, Clone)]
pub struct RowTable {
    files: Arc<Files>,
    /// The files' schema with `__row` last.
    schema: SchemaRef,
}

impl RowTable {
    /// The table of `files`, whose columns are `file_schema`.
    pub fn new(files: Files, file_schema: &Schema) -> Self {
        Self::with_schema(files, with_row_column(file_schema))
    }

    /// The table of `files` with its schema (`__row` included) known.
    pub fn with_schema(files: Files, schema: SchemaRef) -> Self {
        RowTable {
            files: Arc::new(files),
            schema,
        }
    }

    /// The files.
    pub fn files(&self) -> &Files {
        &self.files
    }
}

#[async_trait]
impl TableProvider for RowTable {
    fn schema(&self) -> SchemaRef {
        self.schema.clone()
    }

    fn table_type(&self) -> TableType {
        TableType::Base
    }

    async fn scan(
        &self,
        state: &dyn Session,
        projection: Option<&Vec<usize>>,
        _filters: &[Expr],
        _limit: Option<usize>,
    ) -> Result<Arc<dyn ExecutionPlan>> {
        let all: Vec<usize> = (0..self.schema.fields().len()).collect();
        let columns = projection.cloned().unwrap_or(all);
        let parts = self.files.partitions(state.config().target_partitions());
        let pieces = pieces_exec(&parts)?;
        let schema_file = self.files.pieces.first().map(|p| p.path.clone());
        let plan = ScanPlan {
            schema_file: schema_file.unwrap_or_else(|| self.files.given.clone()),
            columns,
        };
        Ok(Arc::new(RowScanExec::new(
            pieces,
            self.schema.clone(),
            plan,
        )?))
    }
}

/// The columns of a piece list.
fn pieces_schema() -> SchemaRef {
    Arc::new(Schema::new(vec![
        Field::new("path", DataType::Utf8, false),
        Field::new("row_group", DataType::UInt64, false),
        Field::new("first_row", DataType::UInt64, false),
    ]))
}

/// The row groups of each partition as an in-memory table, one batch per row group:
/// Ballista gives each task its own partitions of such a scan (it cannot split a scan
/// it does not know, and every task would read every partition).
fn pieces_exec(parts: &[Vec<Piece>]) -> Result<Arc<dyn ExecutionPlan>> {
    let schema = pieces_schema();
    let batches = parts
        .iter()
        .map(|pieces| {
            pieces
                .iter()
                .map(|p| {
                    let columns: Vec<ArrayRef> = vec![
                        Arc::new(StringArray::from(vec![p
                            .path
                            .to_string_lossy()
                            .into_owned()])),
                        Arc::new(UInt64Array::from(vec![p.row_group as u64])),
                        Arc::new(UInt64Array::from(vec![p.first_row])),
                    ];
                    RecordBatch::try_new(schema.clone(), columns).map_err(DataFusionError::from)
                })
                .collect::<Result<Vec<_>>>()
        })
        .collect::<Result<Vec<_>>>()?;
    Ok(MemorySourceConfig::try_new_exec(&batches, schema, None)?)
}

/// What a [`RowScanExec`] holds besides its input: plain data, for the codec.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ScanPlan {
    /// A file whose footer gives the columns (every file has the same).
    pub schema_file: PathBuf,
    /// Columns of the table (the files' columns, then `__row`) that the scan gives.
    pub columns: Vec<usize>,
}

/// Reads the row groups its input lists (one partition of the input per partition of
/// the scan), adding `__row`.
#[derive(Debug)]
pub struct RowScanExec {
    /// The row groups to read.
    input: Arc<dyn ExecutionPlan>,
    plan: ScanPlan,
    /// The table's schema (all columns).
    table_schema: SchemaRef,
    properties: Arc<PlanProperties>,
}

impl RowScanExec {
    /// A scan of the row groups `input` lists, giving `plan.columns` of `table_schema`.
    pub fn new(
        input: Arc<dyn ExecutionPlan>,
        table_schema: SchemaRef,
        plan: ScanPlan,
    ) -> Result<Self> {
        let projected = Arc::new(table_schema.project(&plan.columns)?);
        let partitions = input.properties().output_partitioning().partition_count();
        let properties = PlanProperties::new(
            EquivalenceProperties::new(projected),
            Partitioning::UnknownPartitioning(partitions),
            EmissionType::Incremental,
            Boundedness::Bounded,
        );
        Ok(RowScanExec {
            input,
            plan,
            table_schema,
            properties: Arc::new(properties),
        })
    }

    /// The scan as plain data.
    pub fn plan(&self) -> &ScanPlan {
        &self.plan
    }

    /// The scan of `plan` over `input` (received from the codec).
    pub fn from_plan(input: Arc<dyn ExecutionPlan>, plan: ScanPlan) -> Result<Self> {
        let table_schema = with_row_column(file_schema(&plan.schema_file)?.as_ref());
        Self::new(input, table_schema, plan)
    }
}

impl DisplayAs for RowScanExec {
    fn fmt_as(&self, _t: DisplayFormatType, f: &mut fmt::Formatter) -> fmt::Result {
        write!(f, "RowScanExec: columns {:?}", self.plan.columns)
    }
}

impl ExecutionPlan for RowScanExec {
    fn name(&self) -> &str {
        "RowScanExec"
    }

    fn properties(&self) -> &Arc<PlanProperties> {
        &self.properties
    }

    fn children(&self) -> Vec<&Arc<dyn ExecutionPlan>> {
        vec![&self.input]
    }

    fn apply_expressions(
        &self,
        _f: &mut dyn FnMut(&Arc<dyn PhysicalExpr>) -> Result<TreeNodeRecursion>,
    ) -> Result<TreeNodeRecursion> {
        Ok(TreeNodeRecursion::Continue)
    }

    fn with_new_children(
        self: Arc<Self>,
        mut children: Vec<Arc<dyn ExecutionPlan>>,
    ) -> Result<Arc<dyn ExecutionPlan>> {
        let input = children
            .pop()
            .ok_or_else(|| DataFusionError::Internal("RowScanExec takes one input".into()))?;
        Ok(Arc::new(RowScanExec::new(
            input,
            self.table_schema.clone(),
            self.plan.clone(),
        )?))
    }

    fn execute(
        &self,
        partition: usize,
        context: Arc<TaskContext>,
    ) -> Result<SendableRecordBatchStream> {
        let listed = self.input.execute(partition, context)?;
        let schema = self.properties.eq_properties.schema().clone();
        let row_position = self.table_schema.fields().len() - 1;
        let columns = self.plan.columns.clone();
        let file_columns: Vec<usize> = columns
            .iter()
            .copied()
            .filter(|&c| c != row_position)
            .collect();
        let out_schema = schema.clone();
        let batches = listed.flat_map(move |listing| {
            let read = listing.and_then(|listing| {
                let mut out = Vec::new();
                for piece in listed_pieces(&listing)? {
                    out.extend(read_piece(
                        &piece,
                        &file_columns,
                        &columns,
                        row_position,
                        &out_schema,
                    )?);
                }
                Ok(out)
            });
            futures::stream::iter(match read {
                Ok(batches) => batches,
                Err(e) => vec![Err(e)],
            })
        });
        Ok(Box::pin(RecordBatchStreamAdapter::new(schema, batches)))
    }
}

/// The row groups a batch of the piece list names.
fn listed_pieces(batch: &RecordBatch) -> Result<Vec<Piece>> {
    let bad = || DataFusionError::Internal("a malformed list of row groups".into());
    let paths = batch.column(0).as_string_opt::<i32>().ok_or_else(bad)?;
    let groups = batch
        .column(1)
        .as_primitive_opt::<UInt64Type>()
        .ok_or_else(bad)?;
    let firsts = batch
        .column(2)
        .as_primitive_opt::<UInt64Type>()
        .ok_or_else(bad)?;
    Ok((0..batch.num_rows())
        .map(|i| Piece {
            path: PathBuf::from(paths.value(i)),
            row_group: groups.value(i) as usize,
            first_row: firsts.value(i),
            rows: 0,
        })
        .collect())
}

/// One row group's batches with `__row`, in the order of `columns`.
fn read_piece(
    piece: &Piece,
    file_columns: &[usize],
    columns: &[usize],
    row_position: usize,
    schema: &SchemaRef,
) -> Result<Vec<Result<RecordBatch>>> {
    let builder = reader(&piece.path)?;
    let mask = ProjectionMask::roots(builder.parquet_schema(), file_columns.iter().copied());
    let batches = builder
        .with_row_groups(vec![piece.row_group])
        .with_projection(mask)
        .with_batch_size(BATCH_ROWS)
        .build()
        .map_err(|e| DataFusionError::Execution(format!("{}: {e}", piece.path.display())))?;
    let mut sorted: Vec<usize> = file_columns.to_vec();
    sorted.sort_unstable();
    let mut first = piece.first_row;
    let mut out = Vec::new();
    for batch in batches {
        let batch = batch
            .map_err(|e| DataFusionError::Execution(format!("{}: {e}", piece.path.display())))?;
        let n = batch.num_rows() as u64;
        let rows: ArrayRef = Arc::new(UInt64Array::from_iter_values(first..first + n));
        first += n;
        let arrays: Vec<ArrayRef> = columns
            .iter()
            .map(|&c| match c == row_position {
                true => rows.clone(),
                false => batch.column(sorted.binary_search(&c).unwrap_or(0)).clone(),
            })
            .collect();
        out.push(RecordBatch::try_new(schema.clone(), arrays).map_err(DataFusionError::from));
    }
    Ok(out)
}
