//! Pure analyses: computation only, no files and no printing.

pub mod abx;
pub mod variance;
