//! Empirical-Bayes priors: one prior fitted across levels by maximising the
//! marginal likelihood of every level's data.
//!
//! - Beta: beta-binomial likelihood, Newton's method on (ln a, ln b) with exact
//!   gradient and Hessian (digamma, trigamma) and a backtracking line search.
//! - Gamma: negative-binomial likelihood with exposures, the same Newton method.
//! - Dirichlet: Dirichlet-multinomial likelihood by Minka's fixed-point iteration
//!   (T. Minka 2000, "Estimating a Dirichlet distribution", eq. 55).
//! - Normal-Inverse-Gamma: a normal hierarchy. The inverse-gamma part (alpha0,
//!   beta0) is fitted by maximum likelihood to each level's sum of squared
//!   deviations (the same negative-binomial-shaped likelihood as the Gamma fit,
//!   with shape (n-1)/2 and "exposure" m2/2); the between-level variance of the
//!   means, tau^2, by the DerSimonian & Laird (1986) moment estimator; then
//!   mu0 = precision-weighted mean of level means and kappa0 = sigma^2 / tau^2.
//!   Moments for the mean part are robust with few, unequal levels and need no
//!   iterations; maximum likelihood for the variance part uses all the data.
//!
//! Levels without evidence are ignored. When levels show no spread beyond
//! sampling noise the likelihood grows without bound as the prior's strength
//! grows: strength is capped at [`MAX_STRENGTH`] pseudo-observations and the
//! report says so. When every outcome is 0 (or 1) a parameter is floored at
//! [`MIN_PARAMETER`].

use std::collections::HashMap;

use super::special::{digamma, ln_beta, ln_gamma, trigamma};
use super::{BetaPrior, DirichletPrior, FamilyError, GammaPrior, NigPrior, NigStats, Result};

/// Largest prior strength (pseudo-observations) a fit may return.
pub const MAX_STRENGTH: f64 = 1e6;
/// Smallest prior parameter a fit may return.
pub const MIN_PARAMETER: f64 = 1e-3;

/// How a fit went, for users to see what was chosen.
#[derive(Debug, Clone, PartialEq)]
pub struct FitReport {
    /// Log marginal likelihood of all levels under the fitted prior (family's convention).
    pub log_marginal_likelihood: f64,
    pub iterations: usize,
    pub converged: bool,
    /// Prior strength in pseudo-observations (a0 + b0; shape0 for Gamma as pseudo-events
    /// with rate0 pseudo-exposure; sum of concentrations; kappa0 for NIG).
    pub strength: f64,
    /// True when the strength hit [`MAX_STRENGTH`] or a parameter hit [`MIN_PARAMETER`].
    pub at_bound: bool,
    /// Levels with evidence that took part.
    pub levels: usize,
    pub method: &'static str,
    /// Why the data set the prior at a bound without a fit (for example, no level
    /// has more than one row), to be shown to users; `None` after a fit.
    pub unfitted: Option<&'static str>,
}

fn no_levels() -> FamilyError {
    FamilyError::NoLevels
}

/// How a fit reports levels that each hold at most one row. One binary, class or
/// continuous outcome per level cannot tell a level's own rate from noise (its
/// marginal likelihood does not depend on the prior's strength; for continuous
/// outcomes the within- and between-level variances are not separable), so the
/// strength is set to [`MAX_STRENGTH`]: every level is pooled to the overall rate.
/// (Counts are different: one count per level still shows over-dispersion.)
const ONE_ROW_PER_LEVEL: &str =
    "no level has more than one row (or, with recency weights, one row's weight), so the \
     strength is not identified: every level is pooled to the overall rate";

/// The report of a prior the data set at a bound without a fit; `why` says why.
fn unfitted_report(strength: f64, levels: usize, why: &'static str) -> FitReport {
    FitReport {
        log_marginal_likelihood: 0.0,
        iterations: 0,
        converged: true,
        strength,
        at_bound: true,
        levels,
        method: "set without a fit",
        unfitted: Some(why),
    }
}

/// Value, gradient and Hessian of an objective in (x, y).
type Derivatives = (f64, [f64; 2], [[f64; 2]; 2]);

/// Maximise f over x, y > 0 by Newton steps on (ln x, ln y) with backtracking;
/// `project` keeps the point inside the allowed region and reports hitting it.
fn newton_positive(
    start: (f64, f64),
    f: impl Fn(f64, f64) -> Derivatives,
    project: impl Fn(f64, f64) -> (f64, f64, bool),
) -> (f64, f64, usize, bool, bool) {
    let (mut x, mut y, mut bound) = project(start.0, start.1);
    let (mut value, mut g, mut h) = f(x, y);
    for iteration in 1..=200 {
        // Gradient and Hessian in u = ln x, v = ln y.
        let gu = [x * g[0], y * g[1]];
        let huu = x * x * h[0][0] + x * g[0];
        let hvv = y * y * h[1][1] + y * g[1];
        let huv = x * y * h[0][1];
        let det = huu * hvv - huv * huv;
        let (mut du, mut dv) = if huu < 0.0 && det > 0.0 {
            (
                -(hvv * gu[0] - huv * gu[1]) / det,
                -(huu * gu[1] - huv * gu[0]) / det,
            )
        } else {
            // Not concave here: a gradient step of bounded length.
            let norm = (gu[0] * gu[0] + gu[1] * gu[1]).sqrt().max(1e-300);
            (gu[0] / norm, gu[1] / norm)
        };
        let cap = 2.0 / du.abs().max(dv.abs()).max(2.0);
        du *= cap;
        dv *= cap;
        let mut step = 1.0;
        let mut moved = false;
        for _ in 0..60 {
            let (nx, ny, nb) = project(x * (step * du).exp(), y * (step * dv).exp());
            let (nv, ng, nh) = f(nx, ny);
            if nv.is_finite() && nv >= value - 1e-12 * value.abs() {
                let change = ((nx / x).ln().abs()).max((ny / y).ln().abs());
                x = nx;
                y = ny;
                bound = nb;
                let improvement = nv - value;
                value = nv;
                g = ng;
                h = nh;
                moved = true;
                if change < 1e-11 || improvement.abs() <= 1e-15 * value.abs().max(1.0) {
                    return (x, y, iteration, true, bound);
                }
                break;
            }
            step *= 0.5;
        }
        if !moved {
            return (x, y, iteration, true, bound);
        }
    }
    (x, y, 200, false, bound)
}

/// Count identical levels once, with a multiplicity.
fn grouped<const N: usize>(levels: impl Iterator<Item = [f64; N]>) -> Vec<([f64; N], f64)> {
    let mut index: HashMap<[u64; N], usize> = HashMap::new();
    let mut out: Vec<([f64; N], f64)> = Vec::new();
    for level in levels {
        let key = level.map(f64::to_bits);
        match index.get(&key) {
            Some(&i) => out[i].1 += 1.0,
            None => {
                index.insert(key, out.len());
                out.push((level, 1.0));
            }
        }
    }
    out
}

/// Beta prior from per-level (successes, trials).
pub fn fit_beta(levels: &[(f64, f64)]) -> Result<(BetaPrior, FitReport)> {
    let data = grouped(
        levels
            .iter()
            .filter(|(_, n)| *n > 0.0)
            .map(|&(s, n)| [s, (n - s).max(0.0)]),
    );
    let count: f64 = data.iter().map(|(_, m)| m).sum();
    if data.is_empty() {
        return Err(no_levels());
    }
    let (s_total, n_total) = data.iter().fold((0.0, 0.0), |(s, n), ([a, b], m)| {
        (s + m * a, n + m * (a + b))
    });
    let mean = (s_total / n_total).clamp(1e-6, 1.0 - 1e-6);
    if data.iter().all(|([s, f], _)| s + f <= 1.0) {
        let (a, b) = (mean * MAX_STRENGTH, (1.0 - mean) * MAX_STRENGTH);
        return Ok((
            BetaPrior::new(a, b)?,
            unfitted_report(a + b, count as usize, ONE_ROW_PER_LEVEL),
        ));
    }
    let objective = |a: f64, b: f64| -> Derivatives {
        let (mut v, mut ga, mut gb, mut haa, mut hbb, mut hab) = (0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
        let (dab, tab) = (digamma(a + b), trigamma(a + b));
        let (da, db, ta, tb) = (digamma(a), digamma(b), trigamma(a), trigamma(b));
        for ([s, f], m) in &data {
            let n = s + f;
            v += m * (ln_beta(a + s, b + f) - ln_beta(a, b));
            let dn = digamma(a + b + n);
            let tn = trigamma(a + b + n);
            ga += m * (digamma(a + s) - dn - da + dab);
            gb += m * (digamma(b + f) - dn - db + dab);
            haa += m * (trigamma(a + s) - tn - ta + tab);
            hbb += m * (trigamma(b + f) - tn - tb + tab);
            hab += m * (tab - tn);
        }
        (v, [ga, gb], [[haa, hab], [hab, hbb]])
    };
    let project = |a: f64, b: f64| {
        let (mut a, mut b, mut bound) = (a, b, false);
        if a + b > MAX_STRENGTH {
            let k = MAX_STRENGTH / (a + b);
            a *= k;
            b *= k;
            bound = true;
        }
        if a < MIN_PARAMETER || b < MIN_PARAMETER {
            bound = true;
        }
        (a.max(MIN_PARAMETER), b.max(MIN_PARAMETER), bound)
    };
    let (a, b, iterations, converged, at_bound) =
        newton_positive((mean * 10.0, (1.0 - mean) * 10.0), objective, project);
    let prior = BetaPrior::new(a, b)?;
    let (lml, _, _) = objective(a, b);
    Ok((
        prior,
        FitReport {
            log_marginal_likelihood: lml,
            iterations,
            converged,
            strength: a + b,
            at_bound,
            levels: count as usize,
            method: "beta-binomial maximum marginal likelihood (Newton)",
            unfitted: None,
        },
    ))
}

/// Negative-binomial maximum likelihood for (shape, rate) from (events, exposure)
/// pairs with multiplicities; also serves the inverse-gamma part of the NIG fit.
fn fit_shape_rate(data: &[([f64; 2], f64)], method: &'static str) -> Result<(f64, f64, FitReport)> {
    if data.is_empty() {
        return Err(no_levels());
    }
    let count: f64 = data.iter().map(|(_, m)| m).sum();
    let (y_total, t_total) = data
        .iter()
        .fold((0.0, 0.0), |(y, t), ([e, x], m)| (y + m * e, t + m * x));
    let rate = (y_total / t_total).max(1e-12);
    let objective = |a: f64, b: f64| -> Derivatives {
        let (mut v, mut ga, mut gb, mut haa, mut hbb, mut hab) = (0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
        let (lg_a, d_a, t_a, ln_b) = (ln_gamma(a), digamma(a), trigamma(a), b.ln());
        for ([y, t], m) in data {
            let bt = b + t;
            v += m * (ln_gamma(a + y) - lg_a + a * ln_b - (a + y) * bt.ln());
            ga += m * (digamma(a + y) - d_a + ln_b - bt.ln());
            gb += m * (a / b - (a + y) / bt);
            haa += m * (trigamma(a + y) - t_a);
            hbb += m * (-a / (b * b) + (a + y) / (bt * bt));
            hab += m * (1.0 / b - 1.0 / bt);
        }
        (v, [ga, gb], [[haa, hab], [hab, hbb]])
    };
    let project = |a: f64, b: f64| {
        let (mut a, mut b, mut bound) = (a, b, false);
        if a > MAX_STRENGTH {
            b *= MAX_STRENGTH / a;
            a = MAX_STRENGTH;
            bound = true;
        }
        if a < MIN_PARAMETER {
            bound = true;
        }
        (a.max(MIN_PARAMETER), b.max(1e-300), bound)
    };
    let (a, b, iterations, converged, at_bound) =
        newton_positive((1.0, 1.0 / rate), objective, project);
    let (lml, _, _) = objective(a, b);
    Ok((
        a,
        b,
        FitReport {
            log_marginal_likelihood: lml,
            iterations,
            converged,
            strength: a,
            at_bound,
            levels: count as usize,
            method,
            unfitted: None,
        },
    ))
}

/// Gamma prior from per-level (events, exposure).
pub fn fit_gamma(levels: &[(f64, f64)]) -> Result<(GammaPrior, FitReport)> {
    let data = grouped(
        levels
            .iter()
            .filter(|(_, t)| *t > 0.0)
            .map(|&(y, t)| [y, t]),
    );
    let (shape, rate, report) = fit_shape_rate(
        &data,
        "negative-binomial maximum marginal likelihood with exposures (Newton)",
    )?;
    Ok((GammaPrior::new(shape, rate)?, report))
}

/// Dirichlet prior from per-level class counts (Minka's fixed point).
pub fn fit_dirichlet(
    classes: &[String],
    levels: &[Vec<f64>],
) -> Result<(DirichletPrior, FitReport)> {
    let k = classes.len();
    let data: Vec<(Vec<f64>, f64)> = {
        let mut index: HashMap<Vec<u64>, usize> = HashMap::new();
        let mut out: Vec<(Vec<f64>, f64)> = Vec::new();
        for level in levels
            .iter()
            .filter(|c| c.len() == k && c.iter().sum::<f64>() > 0.0)
        {
            let key: Vec<u64> = level.iter().map(|v| v.to_bits()).collect();
            match index.get(&key) {
                Some(&i) => out[i].1 += 1.0,
                None => {
                    index.insert(key, out.len());
                    out.push((level.clone(), 1.0));
                }
            }
        }
        out
    };
    if data.is_empty() {
        return Err(no_levels());
    }
    let count: f64 = data.iter().map(|(_, m)| m).sum();
    let mut totals = vec![0.0; k];
    for (c, m) in &data {
        for (t, v) in totals.iter_mut().zip(c) {
            *t += m * v;
        }
    }
    let grand: f64 = totals.iter().sum();
    if data.iter().all(|(c, _)| c.iter().sum::<f64>() <= 1.0) {
        let alpha: Vec<f64> = totals
            .iter()
            .map(|t| (MAX_STRENGTH * t / grand).max(MIN_PARAMETER))
            .collect();
        let report = unfitted_report(alpha.iter().sum(), count as usize, ONE_ROW_PER_LEVEL);
        return Ok((DirichletPrior::new(classes.to_vec(), alpha)?, report));
    }
    let mut alpha: Vec<f64> = totals
        .iter()
        .map(|t| (10.0 * t / grand).max(MIN_PARAMETER))
        .collect();
    let lml = |alpha: &[f64]| -> f64 {
        let a0: f64 = alpha.iter().sum();
        data.iter()
            .map(|(c, m)| {
                let n: f64 = c.iter().sum();
                let per: f64 = alpha
                    .iter()
                    .zip(c)
                    .map(|(a, x)| ln_gamma(a + x) - ln_gamma(*a))
                    .sum();
                m * (ln_gamma(a0) - ln_gamma(a0 + n) + per)
            })
            .sum()
    };
    let (mut iterations, mut converged, mut at_bound) = (0, false, false);
    for it in 1..=5000 {
        iterations = it;
        let a0: f64 = alpha.iter().sum();
        let denominator: f64 = data
            .iter()
            .map(|(c, m)| m * (digamma(c.iter().sum::<f64>() + a0) - digamma(a0)))
            .sum();
        let mut next: Vec<f64> = alpha
            .iter()
            .enumerate()
            .map(|(j, &a)| {
                let numerator: f64 = data
                    .iter()
                    .map(|(c, m)| m * (digamma(c[j] + a) - digamma(a)))
                    .sum();
                (a * numerator / denominator).max(MIN_PARAMETER)
            })
            .collect();
        let total: f64 = next.iter().sum();
        if total > MAX_STRENGTH {
            next.iter_mut().for_each(|a| *a *= MAX_STRENGTH / total);
            at_bound = true;
        }
        let change = next
            .iter()
            .zip(&alpha)
            .map(|(n, a)| ((n - a) / a).abs())
            .fold(0.0, f64::max);
        alpha = next;
        if change < 1e-10 || (at_bound && change < 1e-6) {
            converged = true;
            break;
        }
    }
    at_bound |= alpha.iter().any(|a| *a <= MIN_PARAMETER);
    let report = FitReport {
        log_marginal_likelihood: lml(&alpha),
        iterations,
        converged,
        strength: alpha.iter().sum(),
        at_bound,
        levels: count as usize,
        method: "Dirichlet-multinomial maximum marginal likelihood (Minka's fixed point)",
        unfitted: None,
    };
    Ok((DirichletPrior::new(classes.to_vec(), alpha)?, report))
}

/// The NIG prior when no level shows spread within it and the data cannot say more:
/// no level has more than one row (or all values are equal): pooled to the
/// values' mean, with their total variance as the expected variance; every level
/// constant and the levels different: each level reads its own value. `None` when
/// some level does show spread (weighted levels of at most one row's weight).
fn without_within_spread(
    used: &[&NigStats],
    df_sum: f64,
    m2_sum: f64,
) -> Option<Result<(NigPrior, FitReport)>> {
    let n: f64 = used.iter().map(|s| s.n).sum();
    let centre = used.iter().map(|s| s.n * s.mean).sum::<f64>() / n;
    let total = used
        .iter()
        .map(|s| s.n * (s.mean - centre).powi(2) + s.m2)
        .sum::<f64>()
        / n;
    if !(centre.is_finite() && total.is_finite()) {
        return (df_sum == 0.0 || m2_sum == 0.0).then_some(Err(FamilyError::FitOverflow));
    }
    // A variance the data say is zero, as a positive number far below the values' size.
    let tiny = (f64::EPSILON * centre.abs().max(total.sqrt()))
        .powi(2)
        .max(f64::MIN_POSITIVE);
    let prior = |kappa0: f64, variance: f64| {
        NigPrior::new(
            centre,
            kappa0,
            NO_SPREAD_SHAPE,
            variance * (NO_SPREAD_SHAPE - 1.0),
        )
    };
    let (prior, method) = if df_sum == 0.0 {
        (prior(MAX_STRENGTH, total.max(tiny)), ONE_ROW_PER_LEVEL)
    } else if m2_sum == 0.0 && used.iter().all(|s| s.mean == used[0].mean) {
        (
            prior(MAX_STRENGTH, tiny),
            "every value is the same: every level is pooled to it",
        )
    } else if m2_sum == 0.0 {
        (
            prior(MIN_PARAMETER, tiny),
            "each level's values are all the same and the levels differ: each level reads \
             its own value",
        )
    } else {
        return None;
    };
    Some(prior.map(|p| {
        let report = unfitted_report(p.kappa0, used.len(), method);
        (p, report)
    }))
}

/// The inverse-gamma shape when no level shows spread within it: above 2, so the
/// prior's variance of the variance is finite and the `sd` reader is not chosen for
/// a spread nobody measured.
const NO_SPREAD_SHAPE: f64 = 3.0;

/// Normal-Inverse-Gamma prior from per-level statistics (see the module notes).
pub fn fit_nig(levels: &[NigStats]) -> Result<(NigPrior, FitReport)> {
    let used: Vec<&NigStats> = levels.iter().filter(|s| s.n > 0.0).collect();
    if used.is_empty() {
        return Err(no_levels());
    }
    // Inverse-gamma part from levels with more than one observation.
    let spread = grouped(
        used.iter()
            .filter(|s| s.n > 1.0 && s.m2 > 0.0)
            .map(|s| [(s.n - 1.0) / 2.0, s.m2 / 2.0]),
    );
    // Within-level variance for the mean part: the pooled estimate.
    let (m2_sum, df_sum) = used
        .iter()
        .fold((0.0, 0.0), |(m, d), s| (m + s.m2, d + (s.n - 1.0).max(0.0)));
    // No level shows spread within it: nothing for the inverse-gamma part to fit,
    // and every number below must come from the values' own scale.
    if spread.is_empty() {
        if let Some(fixed) = without_within_spread(&used, df_sum, m2_sum) {
            return fixed;
        }
    }
    let sigma2 = m2_sum / df_sum;
    let (alpha0, beta0, mut report) = if spread.is_empty() {
        // Spread only in levels of at most one row's weight: the pooled estimate.
        (
            NO_SPREAD_SHAPE,
            sigma2 * (NO_SPREAD_SHAPE - 1.0),
            FitReport {
                log_marginal_likelihood: 0.0,
                iterations: 0,
                converged: true,
                strength: 0.0,
                at_bound: true,
                levels: used.len(),
                method: "",
                unfitted: None,
            },
        )
    } else {
        fit_shape_rate(&spread, "")?
    };
    // DerSimonian–Laird between-level variance of the level means.
    let w: Vec<f64> = used.iter().map(|s| s.n / sigma2).collect();
    let w_sum: f64 = w.iter().sum();
    let fixed = used.iter().zip(&w).map(|(s, w)| w * s.mean).sum::<f64>() / w_sum;
    let q: f64 = used
        .iter()
        .zip(&w)
        .map(|(s, w)| w * (s.mean - fixed).powi(2))
        .sum();
    let k = used.len() as f64;
    let c = w_sum - w.iter().map(|w| w * w).sum::<f64>() / w_sum;
    let tau2 = if k > 1.0 && c > 0.0 {
        ((q - (k - 1.0)) / c).max(0.0)
    } else {
        0.0
    };
    let kappa0 = if tau2 > 0.0 {
        (sigma2 / tau2).min(MAX_STRENGTH)
    } else {
        MAX_STRENGTH
    };
    let precision: Vec<f64> = used.iter().map(|s| 1.0 / (tau2 + sigma2 / s.n)).collect();
    let mu0 = used
        .iter()
        .zip(&precision)
        .map(|(s, p)| p * s.mean)
        .sum::<f64>()
        / precision.iter().sum::<f64>();
    if !(mu0.is_finite() && kappa0.is_finite() && beta0.is_finite()) {
        return Err(FamilyError::FitOverflow);
    }
    let prior = NigPrior::new(mu0, kappa0.max(MIN_PARAMETER), alpha0, beta0)?;
    report.at_bound |= kappa0 >= MAX_STRENGTH;
    report.strength = prior.kappa0;
    report.levels = used.len();
    report.method =
        "normal hierarchy: inverse-gamma by maximum likelihood on within-level spread, \
                     between-level variance by DerSimonian-Laird moments";
    Ok((prior, report))
}

/// The strength s in [MIN_PARAMETER, MAX_STRENGTH] that maximises `log_likelihood(s)`,
/// searched on log s: the best of a grid of 91 points (ten per factor of ten), then a
/// golden-section search between its neighbours. The grid keeps a likelihood with
/// more than one bump from trapping the search in a poor one. Returns s and whether it
/// lies at the upper end (the levels show no spread around their centres).
pub fn fit_log_scale(log_likelihood: impl Fn(f64) -> Result<f64>) -> Result<(f64, bool)> {
    let (lo, hi) = (MIN_PARAMETER.ln(), MAX_STRENGTH.ln());
    let steps = 90;
    let grid = |k: usize| lo + (hi - lo) * k as f64 / steps as f64;
    let mut best = (0, f64::NEG_INFINITY);
    for k in 0..=steps {
        let v = log_likelihood(grid(k).exp())?;
        if v > best.1 {
            best = (k, v);
        }
    }
    let (mut a, mut b) = (
        grid(best.0.saturating_sub(1)),
        grid((best.0 + 1).min(steps)),
    );
    let ratio = (5f64.sqrt() - 1.0) / 2.0;
    let (mut c, mut d) = (b - ratio * (b - a), a + ratio * (b - a));
    let (mut fc, mut fd) = (log_likelihood(c.exp())?, log_likelihood(d.exp())?);
    for _ in 0..60 {
        if fc >= fd {
            (b, d, fd) = (d, c, fc);
            c = b - ratio * (b - a);
            fc = log_likelihood(c.exp())?;
        } else {
            (a, c, fc) = (c, d, fd);
            d = a + ratio * (b - a);
            fd = log_likelihood(d.exp())?;
        }
    }
    let (x, fx) = if fc >= fd { (c, fc) } else { (d, fd) };
    // The grid's best point stands when the search found nothing better (a flat top).
    let x = if fx >= best.1 { x } else { grid(best.0) };
    let s = x.exp().clamp(MIN_PARAMETER, MAX_STRENGTH);
    Ok((s, s >= MAX_STRENGTH * 0.999))
}
