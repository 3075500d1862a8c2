//! Versioned JSON persistence of fitted ensembles.
//!
//! A saved model is `{"format": "<name>", "version": <n>, "model": {...}}`. Loading checks the
//! format name and version before reading the model, so a file written by a different layout
//! fails with a clear [`EnsembleError::FormatVersion`] instead of a confusing field error.
//! Floats are written with shortest round-trip formatting (serde_json), so a reloaded model
//! predicts bit-for-bit the same numbers.

use serde::Serialize;
use serde::de::DeserializeOwned;

use super::EnsembleError;

/// Format name of a saved [`super::Forest`].
pub const FOREST_FORMAT: &str = "tidemark-forest";
/// Layout version of a saved [`super::Forest`].
pub const FOREST_VERSION: u32 = 1;
/// Format name of a saved [`super::Booster`].
pub const BOOSTER_FORMAT: &str = "tidemark-booster";
/// Layout version of a saved [`super::Booster`].
pub const BOOSTER_VERSION: u32 = 1;
/// Format name of saved [`super::QuantileBoosters`].
pub const QUANTILE_BOOSTERS_FORMAT: &str = "tidemark-quantile-boosters";
/// Layout version of saved [`super::QuantileBoosters`].
pub const QUANTILE_BOOSTERS_VERSION: u32 = 1;

#[derive(Serialize)]
struct Envelope<'a, T> {
    format: &'a str,
    version: u32,
    model: &'a T,
}

/// Writes `model` inside a format/version envelope.
pub(crate) fn to_json<T: Serialize>(
    format: &str,
    version: u32,
    model: &T,
) -> Result<String, EnsembleError> {
    Ok(serde_json::to_string(&Envelope {
        format,
        version,
        model,
    })?)
}

/// Reads a model written by [`to_json`], checking format name and version first.
pub(crate) fn from_json<T: DeserializeOwned>(
    s: &str,
    format: &'static str,
    version: u32,
) -> Result<T, EnsembleError> {
    let mut value: serde_json::Value = serde_json::from_str(s)?;
    let found_format = value
        .get("format")
        .and_then(|v| v.as_str())
        .unwrap_or("(no format field)")
        .to_string();
    let found_version = value
        .get("version")
        .and_then(|v| v.as_u64())
        .map_or(0, |v| v.min(u32::MAX as u64) as u32);
    if found_format != format || found_version != version {
        return Err(EnsembleError::FormatVersion {
            found_format,
            found_version,
            expected_format: format,
            expected_version: version,
        });
    }
    let model = value
        .get_mut("model")
        .map(serde_json::Value::take)
        .ok_or_else(|| EnsembleError::CorruptModel("no \"model\" field".into()))?;
    Ok(serde_json::from_value(model)?)
}

/// Serde helper for `Vec<f64>` that may hold NaN: NaN is written as `null` (JSON has no NaN).
pub(crate) mod nan_as_null {
    use serde::{Deserialize, Deserializer, Serialize, Serializer};

    pub fn serialize<S: Serializer>(v: &[f64], s: S) -> Result<S::Ok, S::Error> {
        let opt: Vec<Option<f64>> = v
            .iter()
            .map(|x| if x.is_finite() { Some(*x) } else { None })
            .collect();
        opt.serialize(s)
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f64>, D::Error> {
        let opt: Vec<Option<f64>> = Vec::deserialize(d)?;
        Ok(opt.into_iter().map(|x| x.unwrap_or(f64::NAN)).collect())
    }
}
