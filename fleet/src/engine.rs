//! A streamed run's passes as engine queries: the rows of the seeded draws are a sort
//! by `flipmend_draw` with a limit, an estimator's pass is one aggregate, and pass 2 is
//! a sort by `flipmend_score_key` with a limit (the listed rows) plus one aggregate (the
//! histogram, the expected count and the control ranks). Everything else (the matrix,
//! the worklist) is flipmend's own code on the driver, through [`RowSource`].

use std::cell::OnceCell;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use datafusion::arrow::array::{Array, AsArray, RecordBatch};
use datafusion::arrow::datatypes::DataType;
use datafusion::common::{DataFusionError, ScalarValue};
use datafusion::logical_expr::{AggregateUDF, Expr, ScalarUDF};
use datafusion::prelude::{cast, ident, lit, DataFrame, SessionContext};
use flipmend::data::origin::Origin;
use flipmend::data::roles::ColumnPlan;
use flipmend::error::{Error, Result};
use flipmend::io::batch_rows::{BatchSpec, ClassRows};
use flipmend::noise::estimators::passes::Passes;
use flipmend::noise::scores::rank_key;
use flipmend::workflow::ranking::ScoreTally;
use flipmend::workflow::streamed::{
    class_order, missing_classes, Draws, Gathered, Kept, RowSource, ScoreJob, Scored, StreamInput,
};
use flipmend::workflow::worklist::{CONTROL_STREAM, SAMPLE_STREAM};
use tokio::runtime::Runtime;

use crate::files::{Files, ROW_COLUMN};
use crate::functions::{from_bytes, job_literal, to_bytes, Draw, ScoreKey, ScoreSpec};
use crate::scan::RowTable;
use crate::shares::{PassesJob, PassesShare, ShareAggregate, TallyJob, TallyShare};

/// The name the table is registered under.
const TABLE: &str = "flipmend_rows";

/// A table of Parquet files, read by an engine.
pub struct EngineSource {
    runtime: Arc<Runtime>,
    ctx: SessionContext,
    table: PathBuf,
    plan: ColumnPlan,
    renormalize: bool,
    /// Rows in the files (their footers say).
    rows: usize,
    /// Dictionary-encoded columns: read as their values, since a Ballista shuffle of a
    /// grouped dictionary column fails ("expected Dictionary(Int32, Utf8) but found
    /// Utf8", measured with separate executors).
    dictionaries: Vec<String>,
    /// Fixed by pass 1.
    classes: OnceCell<Vec<String>>,
}

/// An engine error as flipmend's: ours keep their kind (bad input stays bad input).
/// (Across processes only the message travels: a cluster's failures are internal.)
pub(crate) fn engine(e: DataFusionError) -> Error {
    match e {
        DataFusionError::External(inner) => match inner.downcast::<Error>() {
            Ok(ours) => *ours,
            Err(other) => Error::Internal(format!("engine: {other}")),
        },
        DataFusionError::Context(_, inner) => engine(*inner),
        other => Error::Internal(format!("engine: {other}")),
    }
}

impl EngineSource {
    /// The table of `input` (a Parquet file or a folder of them, holding the
    /// probabilities as columns named by class) on `ctx`.
    pub fn open(runtime: Arc<Runtime>, ctx: SessionContext, input: &StreamInput) -> Result<Self> {
        if input.probs != input.table {
            return Err(Error::Usage(format!(
                "the distributed runner reads the probabilities from the table's own files \
                 (one column per class): give --probs {} or leave it out",
                input.table.display()
            )));
        }
        let (files, schema) = Files::open(input.table).map_err(engine)?;
        let header: Vec<String> = schema.fields().iter().map(|f| f.name().clone()).collect();
        let mut plan = ColumnPlan::resolve(input.table, &header, input.options)?;
        if !plan.annotators.is_empty() || plan.source.is_some() {
            return Err(Error::Usage(
                "the distributed runner takes one label column (no annotators' columns or \
                 label source yet)"
                    .into(),
            ));
        }
        plan.numeric.clear();
        let rows = files.rows as usize;
        let dictionaries = schema
            .fields()
            .iter()
            .filter(|f| matches!(f.data_type(), DataType::Dictionary(_, _)))
            .map(|f| f.name().clone())
            .collect();
        ctx.register_table(TABLE, Arc::new(RowTable::new(files, &schema)))
            .map_err(engine)?;
        Ok(EngineSource {
            runtime,
            ctx,
            table: input.table.to_path_buf(),
            plan,
            renormalize: input.renormalize,
            rows,
            dictionaries,
            classes: OnceCell::new(),
        })
    }

    fn classes(&self) -> Result<&[String]> {
        self.classes
            .get()
            .map(Vec::as_slice)
            .ok_or_else(|| Error::Internal("a pass before the classes were read".into()))
    }

    /// The columns a job reads (`__row`, the roles asked for, the classes'
    /// probabilities) and how to read them.
    fn columns(&self, roles: Roles) -> (BatchSpec, Vec<Expr>) {
        let classes = self.classes.get().cloned().unwrap_or_default();
        let name = |f: usize| self.plan.header[f].clone();
        let mut header = vec![ROW_COLUMN.to_string(), name(self.plan.label.unwrap_or(0))];
        let mut push = |field: Option<usize>, wanted: bool| {
            field.filter(|_| wanted).map(|f| {
                header.push(name(f));
                header.len() - 1
            })
        };
        let trusted = push(self.plan.trusted, roles.audits);
        let origin = push(self.plan.origin, roles.audits);
        let id = push(self.plan.id, roles.ids);
        let probs = classes
            .iter()
            .map(|c| {
                header.push(c.clone());
                header.len() - 1
            })
            .collect();
        let exprs = header
            .iter()
            .map(|h| match self.dictionaries.contains(h) {
                true => cast(ident(h.as_str()), DataType::Utf8).alias(h.as_str()),
                false => ident(h.as_str()),
            })
            .collect();
        let spec = BatchSpec {
            table: self.table.clone(),
            header,
            row: 0,
            label: 1,
            trusted,
            origin,
            id,
            probs,
            classes,
            renormalize: self.renormalize,
        };
        (spec, exprs)
    }

    fn frame(&self) -> Result<DataFrame> {
        self.block(self.ctx.table(TABLE))
    }

    fn block<T>(
        &self,
        work: impl std::future::Future<Output = datafusion::common::Result<T>>,
    ) -> Result<T> {
        self.runtime.block_on(work).map_err(engine)
    }

    /// The rows `frame` gives, read by `spec`.
    fn collect(&self, frame: DataFrame, spec: &BatchSpec, ids: bool) -> Result<Vec<ClassRows>> {
        let batches = self.block(frame.collect())?;
        batches.iter().map(|b| spec.read(b, ids)).collect()
    }

    /// The one value of a one-row aggregate.
    fn aggregate(&self, call: Expr) -> Result<Option<Vec<u8>>> {
        let frame = self
            .frame()?
            .aggregate(vec![], vec![call.alias("share")])
            .map_err(engine)?;
        let batches: Vec<RecordBatch> = self.block(frame.collect())?;
        let bytes = batches
            .iter()
            .find(|b| b.num_rows() > 0)
            .map(|b| b.column(0).as_binary::<i32>())
            .filter(|a| a.is_valid(0))
            .map(|a| a.value(0).to_vec());
        Ok(bytes)
    }

    /// The label names: one row per distinct (label, trusted, origin), each located at
    /// its first row, read by the CSV rules.
    fn names(&self) -> Result<Vec<String>> {
        let (spec, exprs) = self.columns(Roles {
            audits: true,
            ids: false,
        });
        let group: Vec<Expr> = exprs[1..].to_vec();
        let first =
            datafusion::functions_aggregate::expr_fn::min(ident(ROW_COLUMN)).alias(ROW_COLUMN);
        let frame = self
            .frame()?
            .aggregate(group, vec![first])
            .and_then(|f| f.select(exprs))
            .map_err(engine)?;
        let batches = self.block(frame.collect())?;
        let mut names: Vec<String> = Vec::new();
        for batch in &batches {
            for name in spec.names(batch)? {
                if !names.contains(&name) {
                    names.push(name);
                }
            }
        }
        Ok(names)
    }

    /// The `count` rows with the smallest keys of draw `stream`, in draw order.
    fn draw(&self, stream: u64, count: usize, seed: u64) -> Result<Kept> {
        if count == 0 {
            return Ok(Kept::default());
        }
        let (spec, exprs) = self.columns(Roles {
            audits: true,
            ids: true,
        });
        let key =
            ScalarUDF::from(Draw::default()).call(vec![ident(ROW_COLUMN), lit(seed), lit(stream)]);
        let frame = self
            .frame()?
            .select(exprs)
            .and_then(|f| {
                f.sort(vec![
                    key.sort(true, false),
                    ident(ROW_COLUMN).sort(true, false),
                ])
            })
            .and_then(|f| f.limit(0, Some(count)))
            .map_err(engine)?;
        Ok(kept(self.collect(frame, &spec, true)?))
    }
}

/// Which role columns a job reads besides the label.
#[derive(Debug, Clone, Copy)]
struct Roles {
    audits: bool,
    ids: bool,
}

/// Rows read from batches as one set.
fn kept(parts: Vec<ClassRows>) -> Kept {
    let mut out = Kept::default();
    let mut probs = Vec::new();
    let mut k = 0;
    for part in parts {
        let n = part.rows.len();
        k = part.probs.ncols();
        out.rows.extend(&part.rows);
        out.labels.extend(&part.labels);
        out.trusted
            .extend(part.trusted.unwrap_or_else(|| vec![None; n]));
        out.origins
            .extend(part.origins.unwrap_or_else(|| vec![Origin::Audit; n]));
        out.ids
            .extend(part.ids.unwrap_or_else(|| vec![String::new(); n]));
        probs.extend(part.probs.iter().copied());
    }
    out.probs =
        ndarray::Array2::from_shape_vec((out.rows.len(), k), probs).expect("rows × classes values");
    out
}

impl RowSource for EngineSource {
    fn table_path(&self) -> &Path {
        &self.table
    }

    fn probs_path(&self) -> &Path {
        &self.table
    }

    fn plan(&self) -> &ColumnPlan {
        &self.plan
    }

    fn gather(&self, draws: &Draws) -> Result<Gathered> {
        let classes = class_order(&self.names()?);
        let missing: Vec<String> = classes
            .iter()
            .filter(|c| !self.plan.header.contains(c))
            .cloned()
            .collect();
        if !missing.is_empty() {
            return Err(missing_classes(&self.table, &missing));
        }
        let _ = self.classes.set(classes.clone());

        let mut sample = self.draw(SAMPLE_STREAM, draws.sample_rows, draws.seed)?;
        sort_by_row(&mut sample);
        let candidates = self.draw(CONTROL_STREAM, draws.candidates, draws.seed)?;
        Ok(Gathered {
            rows: self.rows,
            classes,
            sample,
            candidates,
        })
    }

    fn estimator_pass(&self, passes: &mut Passes) -> Result<()> {
        self.classes()?;
        let (spec, exprs) = self.columns(Roles {
            audits: true,
            ids: false,
        });
        let job = PassesJob {
            spec,
            share: passes.share(),
        };
        let bytes = to_bytes(&job).map_err(engine)?;
        let call = AggregateUDF::from(ShareAggregate::<PassesShare>::with_job(&bytes)).call(exprs);
        if let Some(bytes) = self.aggregate(call)? {
            let share: PassesShare = from_bytes(&bytes).map_err(engine)?;
            passes.merge(share.0)?;
        }
        Ok(())
    }

    fn score(&self, job: &ScoreJob) -> Result<Scored> {
        self.classes()?;
        let (spec, exprs) = self.columns(Roles {
            audits: false,
            ids: false,
        });
        let score = ScoreSpec {
            spec,
            rule: job.rule.clone(),
        };
        let top = self.top(&score, job)?;
        let tally = TallyJob {
            score,
            ranks: job.ranks.clone(),
        };
        let bytes = to_bytes(&tally).map_err(engine)?;
        let call = AggregateUDF::from(ShareAggregate::<TallyShare>::with_job(&bytes)).call(exprs);
        let share = match self.aggregate(call)? {
            Some(bytes) => from_bytes(&bytes).map_err(engine)?,
            None => TallyShare {
                tally: ScoreTally::new(job.rule.kind()),
                ranks: job.ranks.share(),
            },
        };
        Ok(Scored {
            top,
            ranks: share.ranks,
            tally: share.tally,
        })
    }
}

impl EngineSource {
    /// The listed rows: the smallest rank keys (score key, then row), above the threshold.
    fn top(&self, score: &ScoreSpec, job: &ScoreJob) -> Result<Kept> {
        if job.suspects == 0 {
            return Ok(Kept::default());
        }
        let (spec, exprs) = self.columns(Roles {
            audits: false,
            ids: true,
        });
        let mut args = vec![lit(job_literal(score).map_err(engine)?)];
        args.extend(score.spec.header.iter().map(|h| ident(h.as_str())));
        let key = ScalarUDF::from(ScoreKey::default()).call(args);
        let mut frame = self
            .frame()?
            .select(
                exprs
                    .into_iter()
                    .chain([key.alias("__key")])
                    .collect::<Vec<_>>(),
            )
            .map_err(engine)?;
        if let Some(t) = job.threshold {
            // A score at least t has a key at most t's (the key sorts descending).
            let bound = (rank_key(t, 0) >> 64) as u64;
            frame = frame
                .filter(ident("__key").lt_eq(lit(ScalarValue::UInt64(Some(bound)))))
                .map_err(engine)?;
        }
        let frame = frame
            .sort(vec![
                ident("__key").sort(true, false),
                ident(ROW_COLUMN).sort(true, false),
            ])
            .and_then(|f| f.limit(0, Some(job.suspects)))
            .map_err(engine)?;
        let mut top = kept(self.collect(frame, &spec, true)?);
        top.probs = job.rule.inputs(top.probs.view());
        top.trusted = vec![None; top.rows.len()];
        top.origins = vec![Origin::Audit; top.rows.len()];
        Ok(top)
    }
}

/// Puts a draw's rows in table order.
fn sort_by_row(kept: &mut Kept) {
    let mut order: Vec<usize> = (0..kept.len()).collect();
    order.sort_by_key(|&i| kept.rows[i]);
    let take = |v: &Vec<usize>| order.iter().map(|&i| v[i]).collect::<Vec<_>>();
    kept.rows = take(&kept.rows);
    kept.labels = take(&kept.labels);
    kept.trusted = order.iter().map(|&i| kept.trusted[i]).collect();
    kept.origins = order.iter().map(|&i| kept.origins[i]).collect();
    kept.ids = order.iter().map(|&i| kept.ids[i].clone()).collect();
    kept.probs = kept.probs.select(ndarray::Axis(0), &order);
}
