//! flipmend's functions inside the engine. Each gets a job (postcard bytes: how to read
//! its columns, and what to compute; the score key as its first, literal argument, the
//! aggregates inside the function, see [`crate::shares`]), so that every executor
//! computes exactly what the driver asked for, with flipmend's own code:
//!
//! - `flipmend_draw(__row, seed, stream)`: a row's key in a seeded draw (the sample and
//!   the control candidates are the rows with the smallest keys: a sort with a limit);
//! - `flipmend_score_key(job, __row, label, probabilities…)`: a row's score as a key
//!   that sorts the most suspect row first (the ranking is a sort with a limit);
//! - `flipmend_passes(__row, label, …)`: one pass of an estimator that reads every row, its
//!   state merged across workers ([`flipmend::noise::estimators::passes::Passes`]);
//! - `flipmend_tally(__row, label, probabilities…)`: the scores' histogram and expected count, and how many
//!   rows outrank each control candidate.

use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, AsArray, RecordBatch, UInt64Array};
use datafusion::arrow::datatypes::{DataType, Field, Schema, UInt64Type};
use datafusion::common::{DataFusionError, Result, ScalarValue};
use datafusion::logical_expr::{
    AggregateUDF, ColumnarValue, ScalarFunctionArgs, ScalarUDF, ScalarUDFImpl, Signature,
    Volatility,
};
use flipmend::io::batch_rows::BatchSpec;
use flipmend::noise::scores::rank_key;
use flipmend::workflow::streamed::ScoreRule;
use flipmend::workflow::worklist::draw_key;
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};

use crate::shares::{PassesShare, ShareAggregate, TallyShare};

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
    Ok(ScalarValue::Binary(Some(to_bytes(job)?)))
}

/// A job or state from its bytes.
pub fn from_bytes<T: DeserializeOwned>(bytes: &[u8]) -> Result<T> {
    postcard::from_bytes(bytes).map_err(|e| DataFusionError::Internal(e.to_string()))
}

/// A job's or state's bytes.
pub fn to_bytes<T: Serialize>(value: &T) -> Result<Vec<u8>> {
    postcard::to_stdvec(value).map_err(|e| DataFusionError::Internal(e.to_string()))
}

/// Errors of flipmend's code keep their type in-process (the command maps them to exit
/// codes); across processes their message travels.
pub(crate) fn external(e: flipmend::Error) -> DataFusionError {
    DataFusionError::External(Box::new(e))
}

/// The job in the first argument.
pub(crate) fn job_of<T: DeserializeOwned>(value: &ColumnarValue) -> Result<T> {
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
pub(crate) fn batch_of(spec: &BatchSpec, columns: &[ArrayRef]) -> Result<RecordBatch> {
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
