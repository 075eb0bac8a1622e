//! Pure conjugate-family mathematics: no Arrow, no DataFusion.
//!
//! Each family keeps a prior plus weighted sufficient statistics. States with the
//! same prior merge by adding evidence, so they can be combined across partitions,
//! days and machines; `subtract` removes evidence for out-of-fold and
//! leave-one-out encodings. Readers act on a one-dimensional [`Marginal`].

pub mod beta;
pub mod compensated;
pub mod dirichlet;
pub mod dist;
pub mod empirical;
pub mod gamma;
pub mod nig;
pub mod rng;
pub mod special;

pub use beta::{BetaPosterior, BetaPrior};
pub use dirichlet::{DirichletPosterior, DirichletPrior};
pub use dist::Marginal;
pub use gamma::{GammaPosterior, GammaPrior};
pub use nig::{NigPosterior, NigPrior, NigStats};

use std::fmt;

/// Every way the family mathematics can refuse an input.
#[derive(Debug, Clone, PartialEq)]
pub enum FamilyError {
    /// A prior or reader parameter outside its allowed range.
    InvalidParameter {
        name: &'static str,
        value: f64,
        allowed: &'static str,
    },
    /// An observation (outcome, value, weight, exposure) outside its allowed range.
    InvalidObservation {
        name: &'static str,
        value: f64,
        allowed: &'static str,
    },
    /// A parameter the function computed (not one the caller gave) left its range;
    /// `context` says what was computed from what.
    DerivedParameter {
        context: &'static str,
        name: &'static str,
        value: f64,
        allowed: &'static str,
    },
    /// A posterior whose marginal holds more evidence than the readers support.
    EvidenceBeyondRange(dist::Marginal),
    /// Two states with different priors cannot be merged or subtracted.
    PriorMismatch { left: String, right: String },
    /// More evidence would be removed than the state holds.
    InsufficientEvidence(String),
    /// A Dirichlet class list that is empty, has duplicates or lacks a class.
    InvalidClasses(String),
    /// An empirical-Bayes prior fit saw no level with evidence.
    NoLevels,
    /// An empirical-Bayes prior fit whose arithmetic overflowed on the levels given.
    FitOverflow,
    /// A stored value (bundle, file) that is not a posterior of any family.
    UnknownShape(String),
}

impl fmt::Display for FamilyError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FamilyError::InvalidParameter {
                name,
                value,
                allowed,
            } => write!(
                f,
                "argument {name} = {} is out of range; allowed: {allowed}",
                number(*value)
            ),
            FamilyError::InvalidObservation {
                name,
                value,
                allowed,
            } => write!(
                f,
                "{name} = {} is not allowed; allowed: {allowed}",
                number(*value)
            ),
            FamilyError::DerivedParameter {
                context,
                name,
                value,
                allowed,
            } => write!(
                f,
                "{context} has {name} = {}, out of range (allowed: {allowed}); its inputs are \
                 too extreme",
                number(*value)
            ),
            FamilyError::EvidenceBeyondRange(marginal) => write!(
                f,
                "the posterior holds more evidence than the readers support: its marginal is \
                 {marginal}, and {} may be at most {}",
                marginal.bounded_parameter(),
                number(dist::MAX_SHAPE)
            ),
            FamilyError::PriorMismatch { left, right } => write!(
                f,
                "the two posteriors have different priors ({left} vs {right}); \
                 re-prior one with posterior_with_prior first"
            ),
            FamilyError::InsufficientEvidence(detail) => {
                write!(
                    f,
                    "cannot remove more evidence than the posterior holds: {detail}"
                )
            }
            FamilyError::InvalidClasses(detail) => write!(f, "{detail}"),
            FamilyError::NoLevels => write!(
                f,
                "no level has any evidence to fit a prior from (an empty or all-NULL input); \
                 choose a prior such as beta_prior(0.5, 0.5) instead"
            ),
            FamilyError::UnknownShape(detail) => write!(f, "{detail}"),
            FamilyError::FitOverflow => write!(
                f,
                "the levels' values and weights are too large for the prior fit to hold in 64-bit \
                 numbers (their spread overflows); rescale the target or the weights, or choose \
                 a prior"
            ),
        }
    }
}

impl std::error::Error for FamilyError {}

/// Numbers in messages: plain when readable, scientific when huge or tiny.
pub(crate) fn number(v: f64) -> String {
    if v != 0.0 && v.is_finite() && (v.abs() >= 1e15 || v.abs() < 1e-4) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

pub type Result<T> = std::result::Result<T, FamilyError>;

/// Operations shared by every conjugate state.
pub trait Conjugate: Sized + Clone {
    /// Combine the evidence of two states that share a prior.
    fn merge(&self, other: &Self) -> Result<Self>;
    /// Remove the evidence of `other` (a subset of this state's data).
    fn subtract(&self, other: &Self) -> Result<Self>;
    /// Multiply the evidence by `factor` in [0, 1] (discounting).
    fn scale(&self, factor: f64) -> Result<Self>;
    /// Effective number of observations.
    fn evidence(&self) -> f64;
    /// Log marginal likelihood of the data under the prior (up to terms that depend
    /// only on the data), used to fit priors.
    fn log_marginal_likelihood(&self) -> f64;
    /// The evidence as sums that `merge` adds (counts and totals; for the
    /// Normal-Inverse-Gamma, power sums centred on the prior mean), so that a pool
    /// of many states can add them in compensated arithmetic, in any order.
    fn evidence_sums(&self) -> Vec<compensated::Dd>;
    /// A state with this one's prior and the evidence of `sums` (as
    /// `evidence_sums` gives them, added up).
    fn with_evidence_sums(&self, sums: &[compensated::Dd]) -> Self;
}

/// Require `value` finite and > 0.
pub(crate) fn positive(name: &'static str, value: f64) -> Result<f64> {
    if value.is_finite() && value > 0.0 {
        Ok(value)
    } else {
        Err(FamilyError::InvalidParameter {
            name,
            value,
            allowed: "a finite number > 0",
        })
    }
}

/// Require `value` finite.
pub(crate) fn finite(name: &'static str, value: f64) -> Result<f64> {
    if value.is_finite() {
        Ok(value)
    } else {
        Err(FamilyError::InvalidParameter {
            name,
            value,
            allowed: "a finite number",
        })
    }
}

/// Require a weight finite and >= 0.
pub(crate) fn weight(name: &'static str, value: f64) -> Result<f64> {
    if value.is_finite() && value >= 0.0 {
        Ok(value)
    } else {
        Err(FamilyError::InvalidObservation {
            name,
            value,
            allowed: "a finite number >= 0",
        })
    }
}

/// Rounding residue below zero becomes zero; NaN stays NaN, so that a sum that
/// overflowed is refused where the posterior is stored instead of reading as no
/// evidence (`f64::max` would turn it into 0).
pub(crate) fn at_least_zero(value: f64) -> f64 {
    if value < 0.0 {
        0.0
    } else {
        value
    }
}

/// Require a discount factor in [0, 1].
pub(crate) fn factor(value: f64) -> Result<f64> {
    if (0.0..=1.0).contains(&value) {
        Ok(value)
    } else {
        Err(FamilyError::InvalidParameter {
            name: "factor",
            value,
            allowed: "a number in [0, 1]",
        })
    }
}

impl FamilyError {
    /// Say that a parameter out of range was computed, not given: `context` names
    /// what was computed from what, in the words of the README's reference.
    pub(crate) fn derived(self, context: &'static str) -> FamilyError {
        match self {
            FamilyError::InvalidParameter {
                name,
                value,
                allowed,
            } => FamilyError::DerivedParameter {
                context,
                name,
                value,
                allowed,
            },
            other => other,
        }
    }
}

/// Evidence left after a subtraction: tiny negative rounding residue becomes 0,
/// anything beyond that is an error.
pub(crate) fn remaining(name: &str, total: f64, removed: f64) -> Result<f64> {
    let left = total - removed;
    let tolerance = 1e-9 * total.abs().max(removed.abs()).max(1.0);
    if left >= 0.0 {
        Ok(left)
    } else if left >= -tolerance {
        Ok(0.0)
    } else {
        Err(FamilyError::InsufficientEvidence(format!(
            "{name}: {} removed from {}",
            number(removed),
            number(total)
        )))
    }
}
