//! Frame selection: which frames an analysis uses (labelled frames of a task), how they are
//! pooled, sampled and split. Splits and pooling are in their own files.

pub mod pool;
pub mod sample;
pub mod split;
