//! Gamma prior, Poisson evidence with exposure: Gamma(shape0 + events, rate0 + exposure).

use super::compensated::Dd;
use super::special::ln_gamma;
use super::{at_least_zero, positive, remaining, weight, Conjugate, FamilyError, Marginal, Result};

/// Gamma(shape0, rate0) prior on a Poisson rate per unit of exposure.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GammaPrior {
    pub shape0: f64,
    pub rate0: f64,
}

impl GammaPrior {
    /// Default Gamma(1/2, 1): Jeffreys' shape with one unit of prior exposure, so an
    /// unseen level stays proper.
    pub const DEFAULT: GammaPrior = GammaPrior {
        shape0: 0.5,
        rate0: 1.0,
    };

    pub fn new(shape0: f64, rate0: f64) -> Result<Self> {
        Ok(GammaPrior {
            shape0: positive("shape", shape0)?,
            rate0: positive("rate", rate0)?,
        })
    }
}

/// A Gamma posterior: prior plus event count and exposure.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GammaPosterior {
    pub prior: GammaPrior,
    pub events: f64,
    pub exposure: f64,
}

impl GammaPosterior {
    pub fn new(prior: GammaPrior) -> Self {
        GammaPosterior {
            prior,
            events: 0.0,
            exposure: 0.0,
        }
    }

    pub fn from_parts(shape0: f64, rate0: f64, events: f64, exposure: f64) -> Result<Self> {
        Ok(GammaPosterior {
            prior: GammaPrior::new(shape0, rate0)?,
            events: weight("events", events)?,
            exposure: weight("exposure", exposure)?,
        })
    }

    /// Add `events` counted over `exposure` units.
    pub fn observe(&mut self, events: f64, exposure: f64) -> Result<()> {
        self.events += weight("events", events)?;
        self.exposure += weight("exposure", exposure)?;
        Ok(())
    }

    pub fn without(&self, events: f64, exposure: f64) -> Result<Self> {
        self.subtract(&GammaPosterior {
            prior: self.prior,
            events: weight("events", events)?,
            exposure: weight("exposure", exposure)?,
        })
    }

    pub fn with_prior(&self, prior: GammaPrior) -> Self {
        GammaPosterior { prior, ..*self }
    }

    /// Posterior (shape, rate).
    pub fn params(&self) -> (f64, f64) {
        (
            self.prior.shape0 + self.events,
            self.prior.rate0 + self.exposure,
        )
    }

    pub fn marginal(&self) -> Marginal {
        let (shape, rate) = self.params();
        Marginal::Gamma { shape, rate }
    }

    pub(crate) fn same_prior(&self, other: &Self) -> Result<()> {
        if self.prior == other.prior {
            Ok(())
        } else {
            Err(FamilyError::PriorMismatch {
                left: format!("gamma_prior({}, {})", self.prior.shape0, self.prior.rate0),
                right: format!("gamma_prior({}, {})", other.prior.shape0, other.prior.rate0),
            })
        }
    }
}

impl Conjugate for GammaPosterior {
    fn merge(&self, other: &Self) -> Result<Self> {
        self.same_prior(other)?;
        Ok(GammaPosterior {
            prior: self.prior,
            events: self.events + other.events,
            exposure: self.exposure + other.exposure,
        })
    }

    fn subtract(&self, other: &Self) -> Result<Self> {
        self.same_prior(other)?;
        Ok(GammaPosterior {
            prior: self.prior,
            events: remaining("events", self.events, other.events)?,
            exposure: remaining("exposure", self.exposure, other.exposure)?,
        })
    }

    fn scale(&self, f: f64) -> Result<Self> {
        let f = super::factor(f)?;
        Ok(GammaPosterior {
            prior: self.prior,
            events: self.events * f,
            exposure: self.exposure * f,
        })
    }

    /// Exposure: the amount of observation behind the rate.
    fn evidence(&self) -> f64 {
        self.exposure
    }

    fn evidence_sums(&self) -> Vec<Dd> {
        vec![Dd::new(self.events), Dd::new(self.exposure)]
    }

    fn with_evidence_sums(&self, sums: &[Dd]) -> Self {
        GammaPosterior {
            prior: self.prior,
            events: at_least_zero(sums[0].value()),
            exposure: at_least_zero(sums[1].value()),
        }
    }

    /// Negative-binomial marginal: lnΓ(α+Y) - lnΓ(α) + α ln β - (α+Y) ln(β+T),
    /// omitting Σ y ln t - ln y! which does not involve the prior.
    fn log_marginal_likelihood(&self) -> f64 {
        let (shape, rate) = self.params();
        let GammaPrior { shape0, rate0 } = self.prior;
        ln_gamma(shape) - ln_gamma(shape0) + shape0 * rate0.ln() - shape * rate.ln()
    }
}
