//! Normal-Inverse-Gamma prior on (mean, variance) of a Normal outcome.
//!
//! Update formulas: K. P. Murphy (2007), "Conjugate Bayesian analysis of the
//! Gaussian distribution", section 6 (eqs. 85-89 and the marginal of the mean, a
//! Student-t with 2 alpha_n degrees of freedom). Data statistics are kept as a
//! weighted count, mean and sum of squared deviations, updated with West's (1979)
//! weighted Welford step and merged with Chan, Golub & LeVeque's (1979) pairwise
//! formula, so values near 1e9 with spread 1e-3 lose no digits.

use super::compensated::{two_prod, Dd};
use super::special::{ln_gamma, LN_2PI};
use super::{finite, positive, remaining, weight, Conjugate, FamilyError, Marginal, Result};

/// NIG(mu0, kappa0, alpha0, beta0) prior.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NigPrior {
    pub mu0: f64,
    pub kappa0: f64,
    pub alpha0: f64,
    pub beta0: f64,
}

impl NigPrior {
    /// Default NIG(0, 1e-4, 1.5, 1): vague about the mean, proper, with finite
    /// variance of the mean for an unseen level. It assumes outcomes of order one;
    /// pass a prior (or fit one) for other scales.
    pub const DEFAULT: NigPrior = NigPrior {
        mu0: 0.0,
        kappa0: 1e-4,
        alpha0: 1.5,
        beta0: 1.0,
    };

    pub fn new(mu0: f64, kappa0: f64, alpha0: f64, beta0: f64) -> Result<Self> {
        Ok(NigPrior {
            mu0: finite("mu0", mu0)?,
            kappa0: positive("kappa0", kappa0)?,
            alpha0: positive("alpha0", alpha0)?,
            beta0: positive("beta0", beta0)?,
        })
    }
}

/// Weighted data statistics: total weight, weighted mean, weighted sum of squared deviations.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct NigStats {
    pub n: f64,
    pub mean: f64,
    pub m2: f64,
}

impl NigStats {
    /// West's weighted Welford step, with the m2 increment written as
    /// w δ² n_old / n so that rounding of the stored mean only enters at second order.
    pub fn push(&mut self, x: f64, w: f64) {
        if w == 0.0 {
            return;
        }
        let n = self.n + w;
        let delta = x - self.mean;
        self.mean += delta * (w / n);
        self.m2 += w * delta * delta * (self.n / n);
        self.n = n;
    }

    /// Chan et al.'s pairwise merge.
    pub fn merge(&self, other: &NigStats) -> NigStats {
        if other.n == 0.0 {
            return *self;
        }
        if self.n == 0.0 {
            return *other;
        }
        let n = self.n + other.n;
        let delta = other.mean - self.mean;
        NigStats {
            n,
            mean: self.mean + delta * (other.n / n),
            m2: self.m2 + other.m2 + delta * delta * (self.n / n) * other.n,
        }
    }

    /// Inverse of [`NigStats::merge`]: the statistics of the rest once `part` is removed.
    pub fn remove(&self, part: &NigStats) -> Result<NigStats> {
        if part.n == 0.0 {
            return Ok(*self);
        }
        let n = remaining("observations (n)", self.n, part.n)?;
        if n <= 1e-12 * self.n.max(1.0) {
            remaining("squared deviations (m2)", self.m2, part.m2)?;
            return Ok(NigStats::default());
        }
        let mean = self.mean + (self.mean - part.mean) * (part.n / n);
        let delta = part.mean - mean;
        let m2 = self.m2 - part.m2 - delta * delta * (n / self.n) * part.n;
        let m2 = remaining("squared deviations (m2)", m2 + part.m2, part.m2)?;
        Ok(NigStats { n, mean, m2 })
    }
}

/// One weighted value as power sums about a fixed centre `c`: `w`, `w (x - c)`,
/// `w (x - c)^2`, each as an exact (or double-double) product. Summed with
/// [`Dd`] in any order they give the same statistics (see
/// [`crate::family::compensated`]); the centre, a planning-time constant such as
/// the prior mean, keeps the squares from cancelling when values sit far from 0.
pub fn centred_terms(x: f64, w: f64, c: f64) -> Result<[Dd; 3]> {
    let x = check_value(x)?;
    let w = weight("weight", w)?;
    let d = x - c;
    // Its square (and a sum of many) must stay finite.
    if d.abs() >= 1e150 {
        return Err(FamilyError::InvalidObservation {
            name: "value",
            value: x,
            allowed: "a number within 1e150 of the prior mean",
        });
    }
    let d2 = two_prod(d, d);
    let wd2 = if w == 1.0 {
        d2
    } else {
        two_prod(w, d2.hi).add_f64(w * d2.lo)
    };
    Ok([Dd::new(w), two_prod(w, d), wd2])
}

/// Count, mean and sum of squared deviations from centred power sums.
pub fn stats_from_centred(n: Dd, s1: Dd, s2: Dd, c: f64) -> NigStats {
    if n.value() <= 0.0 {
        return NigStats::default();
    }
    let shift = s1 / n;
    let m2 = super::at_least_zero((s2 - shift * s1).value());
    NigStats {
        n: n.value(),
        mean: (Dd::new(c) + shift).value(),
        m2,
    }
}

/// A Normal-Inverse-Gamma posterior.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NigPosterior {
    pub prior: NigPrior,
    pub stats: NigStats,
}

/// Posterior parameters (mu_n, kappa_n, alpha_n, beta_n).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NigParams {
    pub mu: f64,
    pub kappa: f64,
    pub alpha: f64,
    pub beta: f64,
}

impl NigPosterior {
    pub fn new(prior: NigPrior) -> Self {
        NigPosterior {
            prior,
            stats: NigStats::default(),
        }
    }

    pub fn from_parts(prior: NigPrior, n: f64, mean: f64, m2: f64) -> Result<Self> {
        let n = weight("n", n)?;
        let mean = finite("mean", mean)?;
        let m2 = weight("m2", m2)?;
        Ok(NigPosterior {
            prior,
            stats: NigStats { n, mean, m2 },
        })
    }

    /// Add one value with a weight.
    pub fn observe(&mut self, x: f64, w: f64) -> Result<()> {
        let x = check_value(x)?;
        let w = weight("weight", w)?;
        self.stats.push(x, w);
        Ok(())
    }

    pub fn without(&self, x: f64, w: f64) -> Result<Self> {
        let x = check_value(x)?;
        let w = weight("weight", w)?;
        let part = NigStats {
            n: w,
            mean: x,
            m2: 0.0,
        };
        Ok(NigPosterior {
            prior: self.prior,
            stats: self.stats.remove(&part)?,
        })
    }

    pub fn with_prior(&self, prior: NigPrior) -> Self {
        NigPosterior { prior, ..*self }
    }

    /// Murphy (2007) eqs. 86-89, with mu_n written as mu0 + n (xbar - mu0) / kappa_n.
    pub fn params(&self) -> NigParams {
        let NigPrior {
            mu0,
            kappa0,
            alpha0,
            beta0,
        } = self.prior;
        let NigStats { n, mean, m2 } = self.stats;
        let kappa = kappa0 + n;
        // Without evidence the prior is returned as given: `d` is then not a
        // distance from data, and d * d * 0 is NaN for a prior mean beyond 1e154.
        if n <= 0.0 {
            return NigParams {
                mu: mu0,
                kappa,
                alpha: alpha0,
                beta: beta0 + 0.5 * m2,
            };
        }
        let d = mean - mu0;
        NigParams {
            mu: mu0 + d * (n / kappa),
            kappa,
            alpha: alpha0 + 0.5 * n,
            beta: beta0 + 0.5 * m2 + 0.5 * d * d * (kappa0 * n / kappa),
        }
    }

    /// Marginal posterior of the mean: mu_n + sqrt(beta_n / (alpha_n kappa_n)) t_{2 alpha_n}.
    pub fn marginal(&self) -> Marginal {
        let p = self.params();
        Marginal::StudentT {
            loc: p.mu,
            scale: (p.beta / (p.alpha * p.kappa)).sqrt(),
            dof: 2.0 * p.alpha,
        }
    }

    pub(crate) fn same_prior(&self, other: &Self) -> Result<()> {
        if self.prior == other.prior {
            Ok(())
        } else {
            let show = |p: &NigPrior| {
                format!(
                    "nig_prior({}, {}, {}, {})",
                    p.mu0, p.kappa0, p.alpha0, p.beta0
                )
            };
            Err(FamilyError::PriorMismatch {
                left: show(&self.prior),
                right: show(&other.prior),
            })
        }
    }
}

fn check_value(x: f64) -> Result<f64> {
    if x.is_finite() {
        Ok(x)
    } else {
        Err(FamilyError::InvalidObservation {
            name: "value",
            value: x,
            allowed: "a finite number",
        })
    }
}

impl Conjugate for NigPosterior {
    fn merge(&self, other: &Self) -> Result<Self> {
        self.same_prior(other)?;
        Ok(NigPosterior {
            prior: self.prior,
            stats: self.stats.merge(&other.stats),
        })
    }

    fn subtract(&self, other: &Self) -> Result<Self> {
        self.same_prior(other)?;
        Ok(NigPosterior {
            prior: self.prior,
            stats: self.stats.remove(&other.stats)?,
        })
    }

    fn scale(&self, f: f64) -> Result<Self> {
        let f = super::factor(f)?;
        Ok(NigPosterior {
            prior: self.prior,
            stats: NigStats {
                n: self.stats.n * f,
                mean: if f == 0.0 { 0.0 } else { self.stats.mean },
                m2: self.stats.m2 * f,
            },
        })
    }

    fn evidence(&self) -> f64 {
        self.stats.n
    }

    /// Weight, weighted deviation and weighted squared deviation from the prior
    /// mean (as `centred_terms` gives them per row).
    fn evidence_sums(&self) -> Vec<Dd> {
        let NigStats { n, mean, m2 } = self.stats;
        if n == 0.0 {
            return vec![Dd::ZERO; 3];
        }
        let d = Dd::new(mean) - Dd::new(self.prior.mu0);
        let s1 = Dd::new(n) * d;
        vec![Dd::new(n), s1, Dd::new(m2) + s1 * d]
    }

    fn with_evidence_sums(&self, sums: &[Dd]) -> Self {
        NigPosterior {
            prior: self.prior,
            stats: stats_from_centred(sums[0], sums[1], sums[2], self.prior.mu0),
        }
    }

    /// Murphy (2007) eq. 95: lnΓ(αn) - lnΓ(α0) + α0 ln β0 - αn ln βn + ½ ln(κ0/κn) - (n/2) ln 2π.
    fn log_marginal_likelihood(&self) -> f64 {
        let p = self.params();
        let NigPrior {
            kappa0,
            alpha0,
            beta0,
            ..
        } = self.prior;
        ln_gamma(p.alpha) - ln_gamma(alpha0) + alpha0 * beta0.ln() - p.alpha * p.beta.ln()
            + 0.5 * (kappa0.ln() - p.kappa.ln())
            - 0.5 * self.stats.n * LN_2PI
    }
}
