//! Dirichlet prior, categorical evidence. The marginal of class k is
//! Beta(alpha_k, sum(alpha) - alpha_k).

use super::compensated::Dd;
use super::special::ln_gamma;
use super::{at_least_zero, positive, remaining, weight, Conjugate, FamilyError, Marginal, Result};

/// Dirichlet prior over a named, ordered class list.
#[derive(Debug, Clone, PartialEq)]
pub struct DirichletPrior {
    pub classes: Vec<String>,
    pub alpha0: Vec<f64>,
}

impl DirichletPrior {
    /// Classes must be non-empty and unique; concentrations finite and > 0.
    pub fn new(classes: Vec<String>, alpha0: Vec<f64>) -> Result<Self> {
        if classes.is_empty() {
            return Err(FamilyError::InvalidClasses(
                "the class list is empty; give at least one class".into(),
            ));
        }
        if classes.len() != alpha0.len() {
            return Err(FamilyError::InvalidClasses(format!(
                "{} classes but {} concentrations; give one concentration per class or a single number",
                classes.len(),
                alpha0.len()
            )));
        }
        for (i, c) in classes.iter().enumerate() {
            if classes[..i].contains(c) {
                return Err(FamilyError::InvalidClasses(format!(
                    "class '{c}' appears twice; classes must be unique"
                )));
            }
        }
        for &a in &alpha0 {
            positive("concentration", a)?;
        }
        Ok(DirichletPrior { classes, alpha0 })
    }

    /// Position of a class, or an error naming the known classes.
    pub fn index_of(&self, class: &str) -> Result<usize> {
        self.classes.iter().position(|c| c == class).ok_or_else(|| {
            FamilyError::InvalidClasses(format!(
                "class '{class}' is not in the prior's classes [{}]",
                self.classes.join(", ")
            ))
        })
    }

    fn describe(&self) -> String {
        let pairs: Vec<String> = self
            .classes
            .iter()
            .zip(&self.alpha0)
            .map(|(c, a)| format!("{c}: {a}"))
            .collect();
        format!("dirichlet_prior({{{}}})", pairs.join(", "))
    }
}

/// A Dirichlet posterior: prior plus weighted counts per class.
#[derive(Debug, Clone, PartialEq)]
pub struct DirichletPosterior {
    pub prior: DirichletPrior,
    pub counts: Vec<f64>,
}

impl DirichletPosterior {
    pub fn new(prior: DirichletPrior) -> Self {
        let counts = vec![0.0; prior.classes.len()];
        DirichletPosterior { prior, counts }
    }

    pub fn from_parts(prior: DirichletPrior, counts: Vec<f64>) -> Result<Self> {
        if counts.len() != prior.classes.len() {
            return Err(FamilyError::InvalidClasses(format!(
                "{} counts for {} classes",
                counts.len(),
                prior.classes.len()
            )));
        }
        for &c in &counts {
            weight("count", c)?;
        }
        Ok(DirichletPosterior { prior, counts })
    }

    pub fn observe(&mut self, class: &str, w: f64) -> Result<()> {
        let k = self.prior.index_of(class)?;
        self.counts[k] += weight("weight", w)?;
        Ok(())
    }

    pub fn without(&self, class: &str, w: f64) -> Result<Self> {
        let k = self.prior.index_of(class)?;
        let mut out = self.clone();
        out.counts[k] = remaining("class count", self.counts[k], weight("weight", w)?)?;
        Ok(out)
    }

    pub fn with_prior(&self, prior: DirichletPrior) -> Result<Self> {
        if prior.classes != self.prior.classes {
            return Err(FamilyError::InvalidClasses(format!(
                "the new prior's classes [{}] differ from the posterior's [{}]",
                prior.classes.join(", "),
                self.prior.classes.join(", ")
            )));
        }
        Ok(DirichletPosterior {
            prior,
            counts: self.counts.clone(),
        })
    }

    /// Posterior concentrations.
    pub fn params(&self) -> Vec<f64> {
        self.prior
            .alpha0
            .iter()
            .zip(&self.counts)
            .map(|(a, c)| a + c)
            .collect()
    }

    /// Beta marginal of one class.
    pub fn marginal(&self, k: usize) -> Marginal {
        let total: f64 = self.prior.alpha0.iter().sum::<f64>() + self.counts.iter().sum::<f64>();
        let a = self.prior.alpha0[k] + self.counts[k];
        Marginal::Beta {
            a,
            b: (total - a).max(f64::MIN_POSITIVE),
        }
    }

    pub(crate) fn same_prior(&self, other: &Self) -> Result<()> {
        if self.prior == other.prior {
            Ok(())
        } else {
            Err(FamilyError::PriorMismatch {
                left: self.prior.describe(),
                right: other.prior.describe(),
            })
        }
    }
}

impl Conjugate for DirichletPosterior {
    fn merge(&self, other: &Self) -> Result<Self> {
        self.same_prior(other)?;
        let counts = self
            .counts
            .iter()
            .zip(&other.counts)
            .map(|(a, b)| a + b)
            .collect();
        Ok(DirichletPosterior {
            prior: self.prior.clone(),
            counts,
        })
    }

    fn subtract(&self, other: &Self) -> Result<Self> {
        self.same_prior(other)?;
        let counts = self
            .counts
            .iter()
            .zip(&other.counts)
            .map(|(a, b)| remaining("class count", *a, *b))
            .collect::<Result<Vec<_>>>()?;
        Ok(DirichletPosterior {
            prior: self.prior.clone(),
            counts,
        })
    }

    fn scale(&self, f: f64) -> Result<Self> {
        let f = super::factor(f)?;
        Ok(DirichletPosterior {
            prior: self.prior.clone(),
            counts: self.counts.iter().map(|c| c * f).collect(),
        })
    }

    fn evidence(&self) -> f64 {
        self.counts.iter().sum()
    }

    fn evidence_sums(&self) -> Vec<Dd> {
        self.counts.iter().map(|&c| Dd::new(c)).collect()
    }

    fn with_evidence_sums(&self, sums: &[Dd]) -> Self {
        DirichletPosterior {
            prior: self.prior.clone(),
            counts: sums.iter().map(|s| at_least_zero(s.value())).collect(),
        }
    }

    /// Dirichlet-multinomial: lnΓ(A0) - lnΓ(A0 + N) + Σ [lnΓ(α_k + n_k) - lnΓ(α_k)].
    fn log_marginal_likelihood(&self) -> f64 {
        let a0: f64 = self.prior.alpha0.iter().sum();
        let n: f64 = self.counts.iter().sum();
        let per_class: f64 = self
            .prior
            .alpha0
            .iter()
            .zip(&self.counts)
            .map(|(a, c)| ln_gamma(a + c) - ln_gamma(*a))
            .sum();
        ln_gamma(a0) - ln_gamma(a0 + n) + per_class
    }
}
