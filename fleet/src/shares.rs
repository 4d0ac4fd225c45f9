//! The aggregates: one pass of an estimator (`flipmend_passes`) and the pass-2 tally
//! (`flipmend_tally`), each a [`Share`] of flipmend's mergeable state that a worker builds
//! from its rows and the engine merges, sent between them as postcard bytes.

use std::fmt::Debug;
use std::hash::Hash;
use std::marker::PhantomData;
use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, AsArray};
use datafusion::arrow::datatypes::{DataType, Field, FieldRef};
use datafusion::common::{DataFusionError, Result, ScalarValue};
use datafusion::logical_expr::function::{AccumulatorArgs, StateFieldsArgs};
use datafusion::logical_expr::{Accumulator, AggregateUDFImpl, Signature, Volatility};
use flipmend::io::batch_rows::{BatchSpec, ClassRows};
use flipmend::noise::estimators::passes::{Passes, Rows};
use flipmend::noise::scores::rank_key;
use flipmend::workflow::ranking::ScoreTally;
use flipmend::workflow::streamed::ControlRanks;
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};

use crate::functions::{batch_of, external, from_bytes, to_bytes, ScoreSpec};

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

/// An aggregate whose state is a [`Share`], as bytes. The job travels inside the
/// function (the codecs in [`crate::codec`] carry it), not as a literal argument: an
/// aggregate's literal is copied into every row of every batch, and the tally's job
/// (10,000 control keys) made a 2,000,000-row run take 129 s and 3.5 GB (measured).
#[derive(Debug)]
pub struct ShareAggregate<S> {
    signature: Signature,
    /// The job (postcard bytes); empty in a registry's copy, which only names it.
    job: Arc<[u8]>,
    share: PhantomData<fn() -> S>,
}

impl<S> Default for ShareAggregate<S> {
    fn default() -> Self {
        Self::with_job(&[])
    }
}

impl<S> ShareAggregate<S> {
    /// The aggregate of the job `bytes`.
    pub fn with_job(bytes: &[u8]) -> Self {
        ShareAggregate {
            signature: Signature::variadic_any(Volatility::Immutable),
            job: Arc::from(bytes),
            share: PhantomData,
        }
    }

    /// The job's bytes.
    pub fn job(&self) -> &[u8] {
        &self.job
    }
}

impl<S> PartialEq for ShareAggregate<S> {
    fn eq(&self, other: &Self) -> bool {
        self.signature == other.signature && self.job == other.job
    }
}

impl<S> Eq for ShareAggregate<S> {}

impl<S> Hash for ShareAggregate<S> {
    fn hash<H: std::hash::Hasher>(&self, state: &mut H) {
        self.signature.hash(state);
        self.job.hash(state);
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
        if self.job.is_empty() {
            return Err(DataFusionError::Internal(format!(
                "{} arrived without its job",
                S::NAME
            )));
        }
        Ok(Box::new(ShareAccumulator::<S> {
            job: from_bytes(&self.job)?,
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
    job: S::Job,
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
        let job = &self.job;
        let spec = S::spec(job);
        let rows = spec
            .read(&batch_of(spec, values)?, false)
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
