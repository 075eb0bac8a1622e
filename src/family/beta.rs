//! Beta prior, Bernoulli/binomial evidence: Beta(a0 + successes, b0 + trials - successes).

use super::compensated::Dd;
use super::special::ln_beta;
use super::{at_least_zero, positive, remaining, weight, Conjugate, FamilyError, Marginal, Result};

/// Beta(a0, b0) prior.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BetaPrior {
    pub a0: f64,
    pub b0: f64,
}

impl BetaPrior {
    /// Jeffreys prior Beta(1/2, 1/2): the default, proper and invariant.
    pub const JEFFREYS: BetaPrior = BetaPrior { a0: 0.5, b0: 0.5 };

    pub fn new(a0: f64, b0: f64) -> Result<Self> {
        Ok(BetaPrior {
            a0: positive("a", a0)?,
            b0: positive("b", b0)?,
        })
    }
}

/// A Beta posterior: the prior plus weighted successes and trials.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BetaPosterior {
    pub prior: BetaPrior,
    pub successes: f64,
    pub trials: f64,
}

impl BetaPosterior {
    /// A posterior with no evidence (equal to its prior).
    pub fn new(prior: BetaPrior) -> Self {
        BetaPosterior {
            prior,
            successes: 0.0,
            trials: 0.0,
        }
    }

    /// Rebuild from stored fields, validating them.
    pub fn from_parts(a0: f64, b0: f64, successes: f64, trials: f64) -> Result<Self> {
        let prior = BetaPrior::new(a0, b0)?;
        let trials = weight("trials", trials)?;
        let successes = weight("successes", successes)?;
        if successes > trials * (1.0 + 1e-12) {
            return Err(FamilyError::InvalidObservation {
                name: "successes",
                value: successes,
                allowed: "at most trials",
            });
        }
        Ok(BetaPosterior {
            prior,
            successes: successes.min(trials),
            trials,
        })
    }

    /// Add one 0/1 outcome with a weight.
    pub fn observe(&mut self, outcome: f64, w: f64) -> Result<()> {
        let y = check_outcome(outcome)?;
        let w = weight("weight", w)?;
        self.successes += w * y;
        self.trials += w;
        Ok(())
    }

    /// Add pre-aggregated counts.
    pub fn observe_counts(&mut self, successes: f64, trials: f64) -> Result<()> {
        let n = weight("trials", trials)?;
        let s = weight("successes", successes)?;
        if s > n {
            return Err(FamilyError::InvalidObservation {
                name: "successes",
                value: s,
                allowed: "a number between 0 and trials",
            });
        }
        self.successes += s;
        self.trials += n;
        Ok(())
    }

    /// Remove one weighted outcome (leave-one-out).
    pub fn without(&self, outcome: f64, w: f64) -> Result<Self> {
        let y = check_outcome(outcome)?;
        let w = weight("weight", w)?;
        self.subtract(&BetaPosterior {
            prior: self.prior,
            successes: w * y,
            trials: w,
        })
    }

    pub fn with_prior(&self, prior: BetaPrior) -> Self {
        BetaPosterior { prior, ..*self }
    }

    pub fn failures(&self) -> f64 {
        (self.trials - self.successes).max(0.0)
    }

    /// Posterior parameters (a, b).
    pub fn params(&self) -> (f64, f64) {
        (
            self.prior.a0 + self.successes,
            self.prior.b0 + self.failures(),
        )
    }

    pub fn marginal(&self) -> Marginal {
        let (a, b) = self.params();
        Marginal::Beta { a, b }
    }

    pub(crate) fn same_prior(&self, other: &Self) -> Result<()> {
        if self.prior == other.prior {
            Ok(())
        } else {
            Err(FamilyError::PriorMismatch {
                left: format!("beta_prior({}, {})", self.prior.a0, self.prior.b0),
                right: format!("beta_prior({}, {})", other.prior.a0, other.prior.b0),
            })
        }
    }
}

/// Outcomes must be exactly 0 or 1.
pub fn check_outcome(outcome: f64) -> Result<f64> {
    if outcome == 0.0 || outcome == 1.0 {
        Ok(outcome)
    } else {
        Err(FamilyError::InvalidObservation {
            name: "outcome",
            value: outcome,
            allowed: "0 or 1 (or false/true)",
        })
    }
}

impl Conjugate for BetaPosterior {
    fn merge(&self, other: &Self) -> Result<Self> {
        self.same_prior(other)?;
        Ok(BetaPosterior {
            prior: self.prior,
            successes: self.successes + other.successes,
            trials: self.trials + other.trials,
        })
    }

    fn subtract(&self, other: &Self) -> Result<Self> {
        self.same_prior(other)?;
        let trials = remaining("trials", self.trials, other.trials)?;
        let successes = remaining("successes", self.successes, other.successes)?;
        remaining("failures", self.failures(), other.failures())?;
        Ok(BetaPosterior {
            prior: self.prior,
            successes: successes.min(trials),
            trials,
        })
    }

    fn scale(&self, f: f64) -> Result<Self> {
        let f = super::factor(f)?;
        Ok(BetaPosterior {
            prior: self.prior,
            successes: self.successes * f,
            trials: self.trials * f,
        })
    }

    fn evidence(&self) -> f64 {
        self.trials
    }

    fn evidence_sums(&self) -> Vec<Dd> {
        vec![Dd::new(self.successes), Dd::new(self.trials)]
    }

    fn with_evidence_sums(&self, sums: &[Dd]) -> Self {
        let trials = at_least_zero(sums[1].value());
        let successes = at_least_zero(sums[0].value());
        BetaPosterior {
            prior: self.prior,
            // Not `clamp`, which panics on NaN.
            successes: if successes > trials {
                trials
            } else {
                successes
            },
            trials,
        }
    }

    /// ln B(a, b) - ln B(a0, b0): the probability of the observed 0/1 sequence.
    fn log_marginal_likelihood(&self) -> f64 {
        let (a, b) = self.params();
        ln_beta(a, b) - ln_beta(self.prior.a0, self.prior.b0)
    }
}

/// Weights must be finite and >= 0.
pub fn check_weight(w: f64) -> Result<f64> {
    weight("weight", w)
}
