//! Pure computation: from (layer matrices, selection, options, seed) to records. Nothing here
//! writes files, prints or draws; progress goes through the [`crate::Progress`] handed in.

pub mod abx;
pub mod compare;
pub mod inspect;
pub mod layerwise;
pub mod linalg;
pub mod map;
pub mod probe;
pub mod purity;
pub mod seed;
pub mod stats;
pub mod variance;
