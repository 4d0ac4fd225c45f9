//! flipmend's functions inside the engine. Each takes, as its first argument, a literal
//! job (postcard bytes: how to read the columns that follow, and what to compute), so
//! that every executor computes exactly what the driver asked for, with flipmend's own
//! code:
//!
//! - `flipmend_draw(__row, seed, stream)`: a row's key in a seeded draw (the sample and
//!   the control candidates are the rows with the smallest keys: a sort with a limit);
//! - `flipmend_score_key(job, __row, label, probabilities…)`: a row's score as a key
//!   that sorts the most suspect row first (the ranking is a sort with a limit);
//! - `flipmend_passes(job, …)`: one pass of an estimator that reads every row, its
//!   state merged across workers ([`flipmend::noise::estimators::passes::Passes`]);
//! - `flipmend_tally(job, …)`: the scores' histogram and expected count, and how many
//!   rows outrank each control candidate.

use std::fmt::Debug;
use std::hash::Hash;
use std::marker::PhantomData;
use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, AsArray, RecordBatch, UInt64Array};
use datafusion::arrow::datatypes::{DataType, Field, FieldRef, Schema, UInt64Type};
use datafusion::common::{DataFusionError, Result, ScalarValue};
use datafusion::logical_expr::function::{AccumulatorArgs, StateFieldsArgs};
use datafusion::logical_expr::{
    Accumulator, AggregateUDF, AggregateUDFImpl, ColumnarValue, ScalarFunctionArgs, ScalarUDF,
    ScalarUDFImpl, Signature, Volatility,
};
use flipmend::io::batch_rows::{BatchSpec, ClassRows};
use flipmend::noise::estimators::passes::{Passes, Rows};
use flipmend::noise::scores::rank_key;
use flipmend::workflow::ranking::ScoreTally;
use flipmend::workflow::streamed::{ControlRanks, ScoreRule};
use flipmend::workflow::worklist::draw_key;
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};

/// Every function of flipmend's, to register on a session or an executor.
pub fn scalar_functions() -> Vec<Arc<ScalarUDF>> {
    vec![
        Arc::new(ScalarUDF::from(Draw::default())),
        Arc::new(ScalarUDF::from(ScoreKey::default())),
    ]
}

/// Every aggregate of flipmend's.
pub fn aggregate_functions() -> Vec<Arc<AggregateUDF>> {
    vec![
        Arc::new(AggregateUDF::from(ShareAggregate::<PassesShare>::default())),
        Arc::new(AggregateUDF::from(ShareAggregate::<TallyShare>::default())),
    ]
}

/// A job as a literal.
pub fn job_literal<T: Serialize>(job: &T) -> Result<ScalarValue> {
    let bytes = postcard::to_stdvec(job).map_err(|e| DataFusionError::Internal(e.to_string()))?;
    Ok(ScalarValue::Binary(Some(bytes)))
}

/// A job or state from its bytes.
pub fn from_bytes<T: DeserializeOwned>(bytes: &[u8]) -> Result<T> {
    postcard::from_bytes(bytes).map_err(|e| DataFusionError::Internal(e.to_string()))
}

fn to_bytes<T: Serialize>(value: &T) -> Result<Vec<u8>> {
    postcard::to_stdvec(value).map_err(|e| DataFusionError::Internal(e.to_string()))
}

/// Errors of flipmend's code keep their type in-process (the command maps them to exit
/// codes); across processes their message travels.
fn external(e: flipmend::Error) -> DataFusionError {
    DataFusionError::External(Box::new(e))
}

/// The job in the first argument.
fn job_of<T: DeserializeOwned>(value: &ColumnarValue) -> Result<T> {
    let bytes = match value {
        ColumnarValue::Scalar(ScalarValue::Binary(Some(b))) => b.clone(),
        ColumnarValue::Array(a) if !a.is_empty() && a.is_valid(0) => {
            a.as_binary::<i32>().value(0).to_vec()
        }
        _ => {
            return Err(DataFusionError::Internal(
                "a flipmend function without its job".into(),
            ))
        }
    };
    from_bytes(&bytes)
}

/// The columns after the job as a batch named by `spec`.
fn batch_of(spec: &BatchSpec, columns: &[ArrayRef]) -> Result<RecordBatch> {
    let fields: Vec<Field> = spec
        .header
        .iter()
        .zip(columns)
        .map(|(name, a)| Field::new(name, a.data_type().clone(), true))
        .collect();
    Ok(RecordBatch::try_new(
        Arc::new(Schema::new(fields)),
        columns.to_vec(),
    )?)
}

/// `flipmend_draw(__row, seed, stream)`.
#[derive(Debug, PartialEq, Eq, Hash)]
pub struct Draw {
    signature: Signature,
}

impl Default for Draw {
    fn default() -> Self {
        Draw {
            signature: Signature::exact(
                vec![DataType::UInt64, DataType::UInt64, DataType::UInt64],
                Volatility::Immutable,
            ),
        }
    }
}

impl ScalarUDFImpl for Draw {
    fn name(&self) -> &str {
        "flipmend_draw"
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn return_type(&self, _args: &[DataType]) -> Result<DataType> {
        Ok(DataType::UInt64)
    }

    fn invoke_with_args(&self, args: ScalarFunctionArgs) -> Result<ColumnarValue> {
        let n = args.number_rows;
        let arrays = ColumnarValue::values_to_arrays(&args.args)?;
        let (rows, seeds, streams) = (
            arrays[0].as_primitive::<UInt64Type>(),
            arrays[1].as_primitive::<UInt64Type>(),
            arrays[2].as_primitive::<UInt64Type>(),
        );
        let keys: UInt64Array = (0..n)
            .map(|i| draw_key(seeds.value(i), streams.value(i), rows.value(i) as usize))
            .collect();
        Ok(ColumnarValue::Array(Arc::new(keys)))
    }
}

/// What the score functions need: how to read the columns, and the score.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ScoreSpec {
    /// The columns after the job.
    pub spec: BatchSpec,
    /// The score.
    pub rule: ScoreRule,
}

/// `flipmend_score_key(job, __row, label, probabilities…)`: the upper half of the rank
/// key, so that `ORDER BY key, __row` is the single-machine ranking.
#[derive(Debug, PartialEq, Eq, Hash)]
pub struct ScoreKey {
    signature: Signature,
}

impl Default for ScoreKey {
    fn default() -> Self {
        ScoreKey {
            signature: Signature::variadic_any(Volatility::Immutable),
        }
    }
}

impl ScalarUDFImpl for ScoreKey {
    fn name(&self) -> &str {
        "flipmend_score_key"
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn return_type(&self, _args: &[DataType]) -> Result<DataType> {
        Ok(DataType::UInt64)
    }

    fn invoke_with_args(&self, args: ScalarFunctionArgs) -> Result<ColumnarValue> {
        let job: ScoreSpec = job_of(&args.args[0])?;
        let arrays = ColumnarValue::values_to_arrays(&args.args[1..])?;
        let rows = job
            .spec
            .read(&batch_of(&job.spec, &arrays)?, false)
            .map_err(external)?;
        let (_, scores) = job.rule.scores(rows.probs.view(), &rows.labels);
        let keys: UInt64Array = scores
            .iter()
            .zip(&rows.rows)
            .map(|(&s, &r)| (rank_key(s, r) >> 64) as u64)
            .collect();
        Ok(ColumnarValue::Array(Arc::new(keys)))
    }
}

/// A state that workers build from their rows and the engine merges.
pub trait Share: Serialize + DeserializeOwned + Send + Sync + Debug + 'static {
    /// The job it is started from.
    type Job: DeserializeOwned + Send + Sync + Debug;
    /// The function's name.
    const NAME: &'static str;
    /// How the job reads its columns.
    fn spec(job: &Self::Job) -> &BatchSpec;
    /// An empty share.
    fn start(job: &Self::Job) -> Self;
    /// Takes in rows.
    fn rows(&mut self, job: &Self::Job, rows: &ClassRows) -> Result<()>;
    /// Takes in another share.
    fn merge(&mut self, other: Self) -> Result<()>;
}

/// The job and state of `flipmend_passes`.
#[derive(Debug, Serialize, Deserialize)]
pub struct PassesJob {
    /// The columns after the job.
    pub spec: BatchSpec,
    /// The driver's share of the pass.
    pub share: Passes,
}

/// One pass of an estimator.
#[derive(Debug, Serialize, Deserialize)]
pub struct PassesShare(pub Passes);

impl Share for PassesShare {
    type Job = PassesJob;
    const NAME: &'static str = "flipmend_passes";

    fn spec(job: &PassesJob) -> &BatchSpec {
        &job.spec
    }

    fn start(job: &PassesJob) -> Self {
        PassesShare(job.share.share())
    }

    fn rows(&mut self, _job: &PassesJob, rows: &ClassRows) -> Result<()> {
        let at_random: Option<Vec<bool>> = rows
            .origins
            .as_ref()
            .map(|o| o.iter().map(|o| o.is_random_sample()).collect());
        // Rows come in runs of consecutive table rows (row groups cut into batches);
        // each run is a part, so ties go to the earlier row as in one pass.
        let mut start = 0;
        while start < rows.rows.len() {
            let mut end = start + 1;
            while end < rows.rows.len() && rows.rows[end] == rows.rows[end - 1] + 1 {
                end += 1;
            }
            self.0.rows(&Rows {
                first_row: rows.rows[start],
                probs: rows
                    .probs
                    .slice_axis(ndarray::Axis(0), ndarray::Slice::from(start..end)),
                labels: &rows.labels[start..end],
                trusted: rows.trusted.as_ref().map(|t| &t[start..end]),
                at_random: at_random.as_ref().map(|a| &a[start..end]),
            });
            start = end;
        }
        Ok(())
    }

    fn merge(&mut self, other: Self) -> Result<()> {
        self.0.merge(other.0).map_err(external)
    }
}

/// The job of `flipmend_tally`.
#[derive(Debug, Serialize, Deserialize)]
pub struct TallyJob {
    /// The score.
    pub score: ScoreSpec,
    /// The control candidates' keys.
    pub ranks: ControlRanks,
}

/// The scores' tally and the control candidates' counts.
#[derive(Debug, Serialize, Deserialize)]
pub struct TallyShare {
    /// Every row's score.
    pub tally: ScoreTally,
    /// Rows between the candidates' keys.
    pub ranks: ControlRanks,
}

impl Share for TallyShare {
    type Job = TallyJob;
    const NAME: &'static str = "flipmend_tally";

    fn spec(job: &TallyJob) -> &BatchSpec {
        &job.score.spec
    }

    fn start(job: &TallyJob) -> Self {
        TallyShare {
            tally: ScoreTally::new(job.score.rule.kind()),
            ranks: job.ranks.share(),
        }
    }

    fn rows(&mut self, job: &TallyJob, rows: &ClassRows) -> Result<()> {
        let (_, scores) = job.score.rule.scores(rows.probs.view(), &rows.labels);
        self.tally.add(&scores);
        for (&s, &r) in scores.iter().zip(&rows.rows) {
            self.ranks.add(rank_key(s, r));
        }
        Ok(())
    }

    fn merge(&mut self, other: Self) -> Result<()> {
        self.tally.merge(other.tally);
        self.ranks.merge(&other.ranks);
        Ok(())
    }
}

/// An aggregate whose state is a [`Share`], as bytes.
#[derive(Debug)]
pub struct ShareAggregate<S> {
    signature: Signature,
    share: PhantomData<fn() -> S>,
}

impl<S> Default for ShareAggregate<S> {
    fn default() -> Self {
        ShareAggregate {
            signature: Signature::variadic_any(Volatility::Immutable),
            share: PhantomData,
        }
    }
}

impl<S> PartialEq for ShareAggregate<S> {
    fn eq(&self, other: &Self) -> bool {
        self.signature == other.signature
    }
}

impl<S> Eq for ShareAggregate<S> {}

impl<S> Hash for ShareAggregate<S> {
    fn hash<H: std::hash::Hasher>(&self, state: &mut H) {
        self.signature.hash(state);
    }
}

impl<S: Share> AggregateUDFImpl for ShareAggregate<S> {
    fn name(&self) -> &str {
        S::NAME
    }

    fn signature(&self) -> &Signature {
        &self.signature
    }

    fn return_type(&self, _args: &[DataType]) -> Result<DataType> {
        Ok(DataType::Binary)
    }

    fn accumulator(&self, _args: AccumulatorArgs) -> Result<Box<dyn Accumulator>> {
        Ok(Box::new(ShareAccumulator::<S> {
            job: None,
            share: None,
        }))
    }

    fn state_fields(&self, args: StateFieldsArgs) -> Result<Vec<FieldRef>> {
        Ok(vec![Arc::new(Field::new(
            format!("{}[share]", args.name),
            DataType::Binary,
            true,
        ))])
    }
}

/// One worker's share (or the merged one).
#[derive(Debug)]
struct ShareAccumulator<S: Share> {
    job: Option<S::Job>,
    share: Option<S>,
}

impl<S: Share> ShareAccumulator<S> {
    fn bytes(&self) -> Result<ScalarValue> {
        Ok(ScalarValue::Binary(match &self.share {
            Some(share) => Some(to_bytes(share)?),
            None => None,
        }))
    }
}

impl<S: Share> Accumulator for ShareAccumulator<S> {
    fn update_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        if values.is_empty() || values[0].is_empty() {
            return Ok(());
        }
        if self.job.is_none() {
            self.job = Some(job_of(&ColumnarValue::Array(values[0].clone()))?);
        }
        let job = self.job.as_ref().expect("set above");
        let spec = S::spec(job);
        let rows = spec
            .read(&batch_of(spec, &values[1..])?, false)
            .map_err(external)?;
        let share = self.share.get_or_insert_with(|| S::start(job));
        share.rows(job, &rows)
    }

    fn evaluate(&mut self) -> Result<ScalarValue> {
        self.bytes()
    }

    fn size(&self) -> usize {
        std::mem::size_of_val(self)
    }

    fn state(&mut self) -> Result<Vec<ScalarValue>> {
        Ok(vec![self.bytes()?])
    }

    fn merge_batch(&mut self, states: &[ArrayRef]) -> Result<()> {
        let states = states[0].as_binary::<i32>();
        for i in 0..states.len() {
            if states.is_null(i) {
                continue;
            }
            let other: S = from_bytes(states.value(i))?;
            match &mut self.share {
                Some(share) => share.merge(other)?,
                None => self.share = Some(other),
            }
        }
        Ok(())
    }
}
