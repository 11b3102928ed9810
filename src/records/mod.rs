//! Every output record type, defined once: the analyses produce them, the writers serialise
//! them, the renderers draw them and the report reads them, all through these types. Each
//! derives both `Serialize` and `Deserialize`; a JSON `null` in a float field (how
//! `serde_json` writes NaN) reads back as NaN through [`nan`].

pub mod abx;
pub mod compare;
pub mod inspect;
pub mod map;
pub mod probe;
pub mod run;

use serde::{Deserialize, Serialize};

/// Reference to one input capture in an output header.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CaptureRef {
    /// Display name.
    pub name: String,
    /// Folder as given.
    pub path: String,
}

/// The envelope of every `<name>.json`: tool, version, captures, options, records and any
/// extra top-level fields (summaries, splits, notes).
#[derive(Debug, Serialize, Deserialize)]
pub struct Envelope<T> {
    /// Always `voxstrata`.
    pub tool: String,
    /// Crate version.
    pub version: String,
    /// Inputs.
    pub captures: Vec<CaptureRef>,
    /// The options the analysis ran with.
    pub options: serde_json::Value,
    /// One record per row.
    pub records: Vec<T>,
    /// Extra fields placed at the top level.
    #[serde(flatten)]
    pub extra: serde_json::Map<String, serde_json::Value>,
}

/// JSON `null` ⇄ NaN for float fields: `serde_json` writes a non-finite float as `null`, and
/// this reads it back as NaN, so a record survives a round trip through its own file.
pub mod nan {
    use serde::{Deserialize, Deserializer};

    /// Read an `f64` that may be `null` (NaN).
    pub fn f64<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
    }
}
