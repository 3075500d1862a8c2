//! Versioned JSON persistence of fitted ensembles.
//!
//! A saved model is `{"format": "<name>", "version": <n>, "model": {...}}`. Loading checks the
//! format name and version before reading the model, so a file written by a different layout
//! fails with a clear [`EnsembleError::FormatVersion`] instead of a confusing field error.
//! Model floats (thresholds, leaf values, training targets) are written as decimal strings in
//! their shortest round-trip form and read back with Rust's correctly rounded parser: serde_json's
//! default number parser can be one unit in the last place off, which would change
//! predictions. A reloaded model therefore predicts bit-for-bit the same numbers; NaN (e.g. an
//! OOB prediction for a row in every bag) is written as "NaN".

use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize, Serializer};

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

/// Reads a model written by [`to_json`] (format name and version checked first), then checks
/// its consistency with `validate`, whose message becomes [`EnsembleError::CorruptModel`].
pub(crate) fn from_json_checked<T: DeserializeOwned>(
    s: &str,
    format: &'static str,
    version: u32,
    validate: impl FnOnce(&T) -> Result<(), String>,
) -> Result<T, EnsembleError> {
    let model: T = from_json(s, format, version)?;
    validate(&model).map_err(EnsembleError::CorruptModel)?;
    Ok(model)
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

/// A float as written in a model file: a decimal string (or, when hand-written, a number).
#[derive(Deserialize)]
#[serde(untagged)]
enum NumOrStr {
    Num(f64),
    Str(String),
}

impl NumOrStr {
    fn value<E: serde::de::Error>(self) -> Result<f64, E> {
        match self {
            NumOrStr::Num(v) => Ok(v),
            NumOrStr::Str(s) => s
                .parse::<f64>()
                .map_err(|_| E::custom(format!("not a number: {s:?}"))),
        }
    }
}

/// A float that serialises exactly.
struct Exact(f64);

impl Serialize for Exact {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        // Debug gives the shortest string that parses back to the same value, with an
        // exponent for very large or small magnitudes; NaN and inf are spelled out.
        s.collect_str(&format_args!("{:?}", self.0))
    }
}

/// Serde helper for one `f64` written exactly (see the module docs).
pub(crate) mod exact {
    use super::{Exact, NumOrStr};
    use serde::{Deserialize, Deserializer, Serialize, Serializer};

    pub fn serialize<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
        Exact(*v).serialize(s)
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        NumOrStr::deserialize(d)?.value()
    }
}

/// Serde helper for `Vec<f64>` written exactly (see the module docs); NaN survives.
pub(crate) mod exact_vec {
    use super::{Exact, NumOrStr};
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer>(v: &[f64], s: S) -> Result<S::Ok, S::Error> {
        s.collect_seq(v.iter().map(|x| Exact(*x)))
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f64>, D::Error> {
        Vec::<NumOrStr>::deserialize(d)?
            .into_iter()
            .map(NumOrStr::value)
            .collect()
    }
}
