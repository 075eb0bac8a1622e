//! posterity: conjugate Bayesian encodings of categorical columns, as DataFusion
//! SQL functions.
//!
//! * [`family`] — the pure mathematics of the four conjugate families.

pub mod family;

pub use datafusion;
