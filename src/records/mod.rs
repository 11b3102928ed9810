//! Tidy records that analyses return and writers serialise.

pub mod abx;
