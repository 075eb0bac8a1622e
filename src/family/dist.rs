//! The three marginal distributions every reader works on: Beta (success
//! probabilities and Dirichlet class probabilities), Gamma (Poisson rates) and a
//! located, scaled Student-t (the mean of a Normal-Inverse-Gamma level).
//!
//! Quantiles solve CDF(x) = q by Newton steps on ln x inside a bisection bracket,
//! always against the tail that holds the smaller probability, so q = 1 - 1e-10
//! is as accurate as q = 1e-10.

use super::special::normal_quantile_approx;
use super::special::{beta_inc, beta_inc_density, gamma_inc, gamma_inc_density, ln_beta, ln_gamma};

/// A one-dimensional posterior marginal.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Marginal {
    /// Beta(a, b) on (0, 1).
    Beta { a: f64, b: f64 },
    /// Gamma(shape, rate) on (0, inf).
    Gamma { shape: f64, rate: f64 },
    /// loc + scale * t_dof.
    StudentT { loc: f64, scale: f64, dof: f64 },
}

/// In messages, in the words of the README's reference.
impl std::fmt::Display for Marginal {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        use super::number;
        match *self {
            Marginal::Beta { a, b } => write!(f, "Beta({}, {})", number(a), number(b)),
            Marginal::Gamma { shape, rate } => {
                write!(f, "Gamma(shape {}, rate {})", number(shape), number(rate))
            }
            Marginal::StudentT { loc, scale, dof } => write!(
                f,
                "Student-t(centre {}, scale {}, {} degrees of freedom)",
                number(loc),
                number(scale),
                number(dof)
            ),
        }
    }
}

/// Largest shape (or degrees of freedom) the readers accept: far beyond any data
/// set's evidence, and the edge of the range the special functions are tested on.
pub const MAX_SHAPE: f64 = 1e15;

impl Marginal {
    /// Refuse marginals outside the supported range instead of returning NaN.
    pub fn check(self) -> super::Result<Self> {
        let value = match self {
            Marginal::Beta { a, b } => a.max(b),
            Marginal::Gamma { shape, .. } => shape,
            Marginal::StudentT { dof, .. } => dof,
        };
        if value <= MAX_SHAPE {
            Ok(self)
        } else {
            Err(super::FamilyError::EvidenceBeyondRange(self))
        }
    }

    /// What [`Marginal::check`] bounds, in the words of the README's reference.
    pub fn bounded_parameter(&self) -> &'static str {
        match self {
            Marginal::Beta { .. } => "each shape",
            Marginal::Gamma { .. } => "the shape",
            Marginal::StudentT { .. } => "the degrees of freedom",
        }
    }

    /// Posterior mean. For the Student-t this is its centre `loc`, which is the mean
    /// whenever dof > 1 and the median always.
    pub fn mean(&self) -> f64 {
        match *self {
            Marginal::Beta { a, b } => a / (a + b),
            Marginal::Gamma { shape, rate } => shape / rate,
            Marginal::StudentT { loc, .. } => loc,
        }
    }

    /// Posterior variance; +inf for a Student-t with dof <= 2 (its variance is infinite).
    pub fn var(&self) -> f64 {
        match *self {
            Marginal::Beta { a, b } => {
                let n = a + b;
                (a / n) * (b / n) / (n + 1.0)
            }
            Marginal::Gamma { shape, rate } => shape / (rate * rate),
            Marginal::StudentT { scale, dof, .. } => {
                if dof > 2.0 {
                    scale * scale * dof / (dof - 2.0)
                } else {
                    f64::INFINITY
                }
            }
        }
    }

    pub fn sd(&self) -> f64 {
        self.var().sqrt()
    }

    /// P(theta <= x).
    pub fn cdf(&self, x: f64) -> f64 {
        self.tails(x).0
    }

    /// P(theta > x), computed directly (no 1 - cdf cancellation).
    pub fn prob_above(&self, x: f64) -> f64 {
        self.tails(x).1
    }

    /// (P(theta <= x), P(theta > x)).
    pub fn tails(&self, x: f64) -> (f64, f64) {
        match *self {
            Marginal::Beta { a, b } => {
                if x <= 0.0 {
                    (0.0, 1.0)
                } else if x >= 1.0 {
                    (1.0, 0.0)
                } else {
                    beta_inc(a, b, x, 1.0 - x)
                }
            }
            Marginal::Gamma { shape, rate } => gamma_inc(shape, x.max(0.0) * rate),
            // A scale that underflowed to zero is a point mass at loc.
            Marginal::StudentT {
                loc, scale: 0.0, ..
            } => {
                if x >= loc {
                    (1.0, 0.0)
                } else {
                    (0.0, 1.0)
                }
            }
            Marginal::StudentT { loc, scale, dof } => student_t_tails((x - loc) / scale, dof),
        }
    }

    /// Probability density at x (0 outside the support). For drawing priors; the
    /// readers never need it.
    pub fn density(&self, x: f64) -> f64 {
        match *self {
            Marginal::Beta { a, b } => {
                if x <= 0.0 || x >= 1.0 {
                    return 0.0;
                }
                ((a - 1.0) * x.ln() + (b - 1.0) * (-x).ln_1p() - ln_beta(a, b)).exp()
            }
            Marginal::Gamma { shape, rate } => {
                if x <= 0.0 {
                    return 0.0;
                }
                (shape * rate.ln() + (shape - 1.0) * x.ln() - rate * x - ln_gamma(shape)).exp()
            }
            Marginal::StudentT { scale: 0.0, .. } => 0.0,
            Marginal::StudentT { loc, scale, dof } => {
                let t = (x - loc) / scale;
                let ln_norm = ln_gamma((dof + 1.0) / 2.0)
                    - ln_gamma(dof / 2.0)
                    - 0.5 * (dof * std::f64::consts::PI).ln();
                (ln_norm - (dof + 1.0) / 2.0 * (t * t / dof).ln_1p()).exp() / scale
            }
        }
    }

    /// Inverse CDF at q in [0, 1].
    pub fn quantile(&self, q: f64) -> f64 {
        match *self {
            Marginal::Beta { a, b } => beta_quantile(a, b, q).0,
            Marginal::Gamma { shape, rate } => gamma_quantile(shape, q) / rate,
            Marginal::StudentT { loc, scale, dof } => loc + scale * student_t_quantile(dof, q),
        }
    }
}

/// Tails of the standard Student-t with `dof` degrees of freedom at t:
/// P(T <= -|t|) = I_x(dof/2, 1/2) / 2 with x = dof / (dof + t^2).
pub fn student_t_tails(t: f64, dof: f64) -> (f64, f64) {
    if t.is_nan() {
        return (f64::NAN, f64::NAN);
    }
    let t2 = t * t;
    let (x, y) = if t2 < dof {
        let s = t2 / dof;
        (1.0 / (1.0 + s), s / (1.0 + s))
    } else {
        let r = dof / t2;
        (r / (1.0 + r), 1.0 / (1.0 + r))
    };
    let (i, ic) = beta_inc(dof / 2.0, 0.5, x, y);
    let lower = 0.5 * i;
    let upper = 0.5 + 0.5 * ic;
    if t < 0.0 {
        (lower, upper)
    } else {
        (upper, lower)
    }
}

/// Quantile of the standard Student-t.
pub fn student_t_quantile(dof: f64, q: f64) -> f64 {
    if q.is_nan() || dof.is_nan() {
        return f64::NAN;
    }
    if q <= 0.0 {
        return f64::NEG_INFINITY;
    }
    if q >= 1.0 {
        return f64::INFINITY;
    }
    if q == 0.5 {
        return 0.0;
    }
    let p = 2.0 * q.min(1.0 - q);
    let (x, y) = beta_quantile(dof / 2.0, 0.5, p);
    let t = if x > 0.0 {
        (dof * (y / x)).sqrt()
    } else {
        f64::INFINITY
    };
    if q < 0.5 {
        -t
    } else {
        t
    }
}

/// Quantile of Beta(a, b): returns (x, 1 - x), each accurate in relative terms.
pub fn beta_quantile(a: f64, b: f64, q: f64) -> (f64, f64) {
    if q.is_nan() || a.is_nan() || b.is_nan() {
        return (f64::NAN, f64::NAN);
    }
    if q <= 0.0 {
        return (0.0, 1.0);
    }
    if q >= 1.0 {
        return (1.0, 0.0);
    }
    count_evaluation();
    let (at_half, _) = beta_inc(a, b, 0.5, 0.5);
    if q <= at_half {
        let x = beta_quantile_below_half(a, b, q, 1.0 - q);
        (x, 1.0 - x)
    } else {
        // Solve for y = 1 - x, which lies below one half: Beta(b, a) at 1 - q.
        let y = beta_quantile_below_half(b, a, 1.0 - q, q);
        (1.0 - y, y)
    }
}

/// The Beta(a, b) quantile known to lie in (0, 1/2]; `q` and `qc = 1 - q` both given.
fn beta_quantile_below_half(a: f64, b: f64, q: f64, qc: f64) -> f64 {
    let lower = q <= 0.5;
    let target = if lower { q } else { qc };
    let eval = |x: f64| {
        let (p, pc, density) = beta_inc_density(a, b, x, 1.0 - x);
        let log_slope = (a - 1.0) / x - (b - 1.0) / (1.0 - x);
        (if lower { p } else { pc }, density, log_slope)
    };
    // Start from the small-x power law I_x ~ x^a / (a B(a, b)) or a normal guess.
    let power = ((q.ln() + a.ln() + ln_beta(a, b)) / a).exp();
    let mean = a / (a + b);
    let sd = (mean * (1.0 - mean) / (a + b + 1.0)).sqrt();
    let normal = mean + normal_quantile_approx(q) * sd;
    let guess = if a < 1.0 || normal <= 0.0 || power < 0.5 * mean {
        power
    } else {
        normal
    };
    solve_log(
        target,
        lower,
        guess.clamp(1e-300, 0.5),
        f64::MIN_POSITIVE,
        0.5,
        eval,
    )
}

thread_local! {
    /// Tail evaluations made by the quantile solvers on this thread.
    static EVALUATIONS: std::cell::Cell<u64> = const { std::cell::Cell::new(0) };
}

fn count_evaluation() {
    EVALUATIONS.with(|c| c.set(c.get() + 1));
}

/// Tail evaluations (incomplete beta or gamma functions) the quantile solvers have
/// made on this thread so far: the cost that dominates a quantile.
pub fn quantile_evaluations() -> u64 {
    EVALUATIONS.with(|c| c.get())
}

/// Quantile of Gamma(shape, 1).
pub fn gamma_quantile(a: f64, q: f64) -> f64 {
    if q.is_nan() || a.is_nan() {
        return f64::NAN;
    }
    if q <= 0.0 {
        return 0.0;
    }
    if q >= 1.0 {
        return f64::INFINITY;
    }
    let lower = q <= 0.5;
    let target = if lower { q } else { 1.0 - q };
    let eval = |x: f64| {
        let (p, pc, density) = gamma_inc_density(a, x);
        (if lower { p } else { pc }, density, (a - 1.0) / x - 1.0)
    };
    // Wilson–Hilferty cube-root normal approximation, or the small-x power law.
    let z = normal_quantile_approx(q);
    let wh = a * (1.0 - 1.0 / (9.0 * a) + z / (3.0 * a.sqrt())).powi(3);
    let power = ((q.ln() + ln_gamma(a + 1.0)) / a).exp();
    let guess = if a >= 1.0 && wh > 0.0 {
        wh
    } else if lower {
        power
    } else {
        a.max(-target.ln())
    };
    solve_log(
        target,
        lower,
        guess.clamp(1e-300, 1e300),
        f64::MIN_POSITIVE,
        f64::MAX,
        eval,
    )
}

/// Solve tail(x) = target for x in [lo, hi] by Newton steps on ln tail(x), inside a
/// bracket with bisection whenever a step leaves it. `increasing` says whether the
/// tail is the CDF (true) or the survival function (false); `eval` returns the tail
/// probability, the density at x and its log-derivative f'/f. A lower tail behaves
/// like a power of x near zero, so its steps are taken in ln x; an upper tail falls
/// off like an exponential in x, so its steps are taken in x itself.
///
/// Near the root a Newton step's own error is about (g''/2g') times the step
/// squared (g = ln tail - ln target). When that predicted error is far below the
/// last bit (`SETTLED`), the step's end is returned without evaluating it again.
fn solve_log(
    target: f64,
    increasing: bool,
    start: f64,
    lo: f64,
    hi: f64,
    eval: impl Fn(f64) -> (f64, f64, f64),
) -> f64 {
    /// A predicted relative error this small is below half an ulp.
    const SETTLED: f64 = 1e-17;
    let ln_target = target.ln();
    let (mut lo, mut hi) = (lo, hi);
    let mut x = start.clamp(lo, hi);
    for _ in 0..200 {
        count_evaluation();
        let (tail, density, log_slope) = eval(x);
        if tail == target {
            return x;
        }
        let h = tail.ln() - ln_target;
        if (h < 0.0) == increasing {
            lo = x;
        } else {
            hi = x;
        }
        // d ln tail / dx = ±density / tail.
        let slope = if increasing {
            density / tail
        } else {
            -density / tail
        };
        let mut next = if increasing {
            x * (-h / (x * slope)).exp()
        } else {
            x - h / slope
        };
        if !next.is_finite() || next <= lo || next >= hi {
            next = if lo > 0.0 && hi / lo > 4.0 {
                (lo.ln() + 0.5 * (hi.ln() - lo.ln())).exp()
            } else {
                lo + 0.5 * (hi - lo)
            };
        } else if h.abs() < 1e-4 {
            // g''/g' in the step's variable: ln x for a lower tail (where
            // g' = s = x f / tail), x for an upper tail (where g' = -f / tail).
            let (curvature, relative_step) = if increasing {
                let s = x * slope;
                (1.0 + x * log_slope - s, (next / x).ln())
            } else {
                (log_slope + slope.abs(), (next - x) / x)
            };
            let step = if increasing { relative_step } else { next - x };
            let predicted = 0.5 * curvature.abs() * step * step;
            let scale = if increasing { 1.0 } else { x.abs() };
            if predicted <= SETTLED * scale && relative_step.is_finite() {
                return next;
            }
        }
        if (next - x).abs() <= 2.0 * f64::EPSILON * x.abs()
            || hi - lo <= 4.0 * f64::EPSILON * hi.abs()
        {
            return next;
        }
        x = next;
    }
    x
}
