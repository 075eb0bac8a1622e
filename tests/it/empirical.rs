//! Empirical-Bayes prior fits: against scipy, recovery of known priors with a
//! stated standard error, degenerate data, and the SQL aggregate.

use posterity::family::empirical::{fit_beta, fit_dirichlet, fit_gamma, fit_nig, MAX_STRENGTH};
use posterity::family::rng::SplitMix;
use posterity::family::special::ln_beta;
use posterity::family::{Marginal, NigStats};

/// Draws for the recovery tests.
trait Draws {
    fn binomial(&mut self, n: u32, p: f64) -> f64;
}

impl Draws for SplitMix {
    fn binomial(&mut self, n: u32, p: f64) -> f64 {
        (0..n).filter(|_| self.unit() < p).count() as f64
    }
}

// Reference: scipy.stats.betabinom + scipy.optimize on a committed data set
// (tests/reference/generate_betabinom.py; its output in betabinom_fit.csv).
#[test]
fn beta_binomial_fit_matches_scipy() {
    let levels: Vec<(f64, f64)> = include_str!("../reference/betabinom_levels.csv")
        .lines()
        .skip(1)
        .map(|l| {
            let (s, n) = l.split_once(',').unwrap();
            (s.parse().unwrap(), n.parse().unwrap())
        })
        .collect();
    let fit = include_str!("../reference/betabinom_fit.csv")
        .lines()
        .nth(2)
        .unwrap()
        .to_string();
    let (a, b) = fit.split_once(',').unwrap();
    let (a, b): (f64, f64) = (a.parse().unwrap(), b.parse().unwrap());
    let (prior, report) = fit_beta(&levels).unwrap();
    assert!(report.converged && !report.at_bound, "{report:?}");
    assert!(
        ((prior.a0 - a) / a).abs() < 1e-6,
        "a0 {} vs scipy {a}",
        prior.a0
    );
    assert!(
        ((prior.b0 - b) / b).abs() < 1e-6,
        "b0 {} vs scipy {b}",
        prior.b0
    );
}

/// Observed-information standard errors of (ln a, ln b) for the beta-binomial fit,
/// by central differences of the log marginal likelihood.
fn beta_se(levels: &[(f64, f64)], a: f64, b: f64) -> (f64, f64) {
    let f = |u: f64, v: f64| -> f64 {
        let (a, b) = (u.exp(), v.exp());
        levels
            .iter()
            .map(|(s, n)| ln_beta(a + s, b + n - s) - ln_beta(a, b))
            .sum()
    };
    let (u, v, h) = (a.ln(), b.ln(), 1e-4);
    let fuu = (f(u + h, v) - 2.0 * f(u, v) + f(u - h, v)) / (h * h);
    let fvv = (f(u, v + h) - 2.0 * f(u, v) + f(u, v - h)) / (h * h);
    let fuv =
        (f(u + h, v + h) - f(u + h, v - h) - f(u - h, v + h) + f(u - h, v - h)) / (4.0 * h * h);
    let det = fuu * fvv - fuv * fuv;
    ((-fvv / det).sqrt(), (-fuu / det).sqrt())
}

// Recovery: 5,000 levels from Beta(2, 38) with 1 to 500 trials; the fit must lie
// within 4 standard errors (observed information) of the truth on the log scale.
#[test]
fn beta_recovers_a_known_prior() {
    let mut g = SplitMix(11);
    let levels: Vec<(f64, f64)> = (0..5000)
        .map(|i| {
            let n = 1 + (i * 7919) % 500;
            let p = Marginal::Beta { a: 2.0, b: 38.0 }.quantile(g.unit());
            (g.binomial(n as u32, p), n as f64)
        })
        .collect();
    let (prior, report) = fit_beta(&levels).unwrap();
    let (se_a, se_b) = beta_se(&levels, prior.a0, prior.b0);
    assert!(report.converged);
    assert!(
        ((prior.a0 / 2.0).ln()).abs() < 4.0 * se_a,
        "a0 {} (se of ln a {se_a})",
        prior.a0
    );
    assert!(
        ((prior.b0 / 38.0).ln()).abs() < 4.0 * se_b,
        "b0 {} (se of ln b {se_b})",
        prior.b0
    );
    assert!(
        se_a < 0.1 && se_b < 0.1,
        "the test must be able to fail: se {se_a} {se_b}"
    );
}

#[test]
fn beta_degenerate_cases() {
    // No levels with evidence.
    assert!(fit_beta(&[(0.0, 0.0)]).is_err());
    assert!(fit_beta(&[]).is_err());
    // All levels identical: no spread beyond noise -> strength capped, mean kept.
    let same = vec![(5.0, 100.0); 200];
    let (p, r) = fit_beta(&same).unwrap();
    assert!(
        r.at_bound && (p.a0 + p.b0 - MAX_STRENGTH).abs() < 1.0,
        "{p:?} {r:?}"
    );
    assert!((p.a0 / (p.a0 + p.b0) - 0.05).abs() < 1e-6);
    // One level: capped too.
    let (p, r) = fit_beta(&[(3.0, 10.0)]).unwrap();
    assert!(
        r.at_bound && (p.a0 / (p.a0 + p.b0) - 0.3).abs() < 1e-3,
        "{p:?}"
    );
    // Zero-trial levels are ignored.
    let mut with_empty = same.clone();
    with_empty.push((0.0, 0.0));
    assert_eq!(fit_beta(&with_empty).unwrap().1.levels, 200);
    // All outcomes 0: the success parameter is floored, never 0 or NaN.
    let (p, r) = fit_beta(&vec![(0.0, 20.0); 50]).unwrap();
    assert!(r.at_bound && p.a0 > 0.0 && p.b0.is_finite(), "{p:?}");
    let (p, _) = fit_beta(&vec![(20.0, 20.0); 50]).unwrap();
    assert!(p.b0 > 0.0 && p.a0.is_finite());
}

// Recovery for Gamma-Poisson: rates from Gamma(3, 2) (mean 1.5), exposures 0.5-10.
#[test]
fn gamma_recovers_a_known_prior() {
    let mut g = SplitMix(12);
    let levels: Vec<(f64, f64)> = (0..4000)
        .map(|i| {
            let t = 0.5 + (i % 20) as f64 * 0.5;
            let rate = Marginal::Gamma {
                shape: 3.0,
                rate: 2.0,
            }
            .quantile(g.unit());
            (g.poisson(rate * t) as f64, t)
        })
        .collect();
    let (prior, report) = fit_gamma(&levels).unwrap();
    assert!(report.converged, "{report:?}");
    // Standard error of ln shape at this size is about 0.05 (observed in repeated
    // simulation; common practice, no source): allow 4 of them.
    assert!((prior.shape0 / 3.0).ln().abs() < 0.2, "{prior:?}");
    assert!(
        (prior.shape0 / prior.rate0 / 1.5 - 1.0).abs() < 0.05,
        "{prior:?}"
    );
}

// Recovery for the Dirichlet-multinomial: class probabilities from Dirichlet(2, 5, 1).
#[test]
fn dirichlet_recovers_a_known_prior() {
    let mut g = SplitMix(13);
    let classes: Vec<String> = ["attended", "late", "no_show"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    let truth = [2.0, 5.0, 1.0];
    let levels: Vec<Vec<f64>> = (0..3000)
        .map(|_| {
            // Dirichlet draw from independent Gamma draws.
            let x: Vec<f64> = truth
                .iter()
                .map(|a| {
                    Marginal::Gamma {
                        shape: *a,
                        rate: 1.0,
                    }
                    .quantile(g.unit())
                })
                .collect();
            let s: f64 = x.iter().sum();
            let mut counts = vec![0.0; 3];
            for _ in 0..40 {
                let u = g.unit() * s;
                let k = if u < x[0] {
                    0
                } else if u < x[0] + x[1] {
                    1
                } else {
                    2
                };
                counts[k] += 1.0;
            }
            counts
        })
        .collect();
    let (prior, report) = fit_dirichlet(&classes, &levels).unwrap();
    assert!(report.converged, "{report:?}");
    for (got, want) in prior.alpha0.iter().zip(truth) {
        assert!((got / want).ln().abs() < 0.15, "{:?}", prior.alpha0);
    }
}

// Normal hierarchy: level means from N(100, 5^2), values N(mean, 20^2).
#[test]
fn nig_recovers_the_hierarchy() {
    let mut g = SplitMix(14);
    let levels: Vec<NigStats> = (0..2000)
        .map(|i| {
            let mean = 100.0 + 5.0 * g.normal();
            let mut s = NigStats::default();
            for _ in 0..(2 + i % 30) {
                s.push(mean + 20.0 * g.normal(), 1.0);
            }
            s
        })
        .collect();
    let (prior, report) = fit_nig(&levels).unwrap();
    assert!(report.converged, "{report:?}");
    assert!((prior.mu0 - 100.0).abs() < 0.5, "{prior:?}");
    // kappa0 = sigma^2 / tau^2 = 400 / 25 = 16.
    assert!((prior.kappa0 / 16.0).ln().abs() < 0.25, "{prior:?}");
    // The inverse-gamma prior's mean beta0 / (alpha0 - 1) is the within-level variance.
    assert!(
        (prior.beta0 / (prior.alpha0 - 1.0) / 400.0 - 1.0).abs() < 0.05,
        "{prior:?}"
    );
}

// A fitted prior is a property of the data, not of its units: rescaling and shifting
// a continuous target (y -> c y + d) moves mu0 to c mu0 + d and beta0 to c^2 beta0 and
// leaves kappa0 and alpha0 alone — for replicated levels, for levels of one row each
// (where the within- and between-level variances cannot be told apart and every level
// is pooled) and for levels constant within (each level reads its own value).
#[test]
fn nig_fit_follows_the_target_s_units() {
    let mut g = SplitMix(15);
    let replicated: Vec<Vec<f64>> = (0..300)
        .map(|i| {
            let mean = 10.0 + 2.0 * g.normal();
            (0..(1 + i % 5)).map(|_| mean + 3.0 * g.normal()).collect()
        })
        .collect();
    let singletons: Vec<Vec<f64>> = (0..300).map(|_| vec![10.0 + 3.0 * g.normal()]).collect();
    let constant: Vec<Vec<f64>> = (0..300).map(|i| vec![(i % 7) as f64; 3]).collect();
    let stats = |levels: &[Vec<f64>], c: f64, d: f64| -> Vec<NigStats> {
        levels
            .iter()
            .map(|v| {
                let mut s = NigStats::default();
                v.iter().for_each(|y| s.push(c * y + d, 1.0));
                s
            })
            .collect()
    };
    for (name, levels) in [
        ("replicated", &replicated),
        ("one row per level", &singletons),
        ("constant within", &constant),
    ] {
        let (base, report) = fit_nig(&stats(levels, 1.0, 0.0)).unwrap();
        for (c, d) in [(1e6, 0.0), (1e-6, 5.0), (-3.0, 1e3)] {
            let (p, _) = fit_nig(&stats(levels, c, d)).unwrap();
            let close = |a: f64, b: f64| (a - b).abs() <= 1e-6 * a.abs().max(b.abs());
            assert!(close(p.mu0, c * base.mu0 + d), "{name} {c}: {p:?} {base:?}");
            assert!(close(p.kappa0, base.kappa0), "{name} {c}: {p:?} {base:?}");
            assert!(close(p.alpha0, base.alpha0), "{name} {c}: {p:?} {base:?}");
            if name != "constant within" {
                assert!(
                    close(p.beta0, c * c * base.beta0),
                    "{name} {c}: {p:?} {base:?}"
                );
            }
        }
        match name {
            "replicated" => assert_eq!(report.unfitted, None),
            "one row per level" => {
                assert_eq!(base.kappa0, MAX_STRENGTH, "{base:?}");
                // The prior's expected variance is the values' total variance (3^2).
                let variance = base.beta0 / (base.alpha0 - 1.0);
                assert!((variance / 9.0 - 1.0).abs() < 0.2, "{base:?}");
                assert!(report
                    .unfitted
                    .unwrap()
                    .contains("no level has more than one row"));
            }
            _ => {
                assert!(
                    base.kappa0 <= 1e-3,
                    "each level reads its own value: {base:?}"
                );
                assert!(base.beta0 < 1e-20, "{base:?}");
                assert!(report.unfitted.is_some());
            }
        }
    }
    // Every value the same: pooled to it, with a positive (tiny) spread.
    let (p, r) = fit_nig(&stats(&vec![vec![4.0; 3]; 20], 1.0, 0.0)).unwrap();
    assert!(p.kappa0 == MAX_STRENGTH && p.mu0 == 4.0 && p.beta0 > 0.0 && p.beta0 < 1e-20);
    assert!(r.unfitted.unwrap().contains("every value is the same"));
}

// Exposure in other units (hours for days: exposure x c) leaves the shape alone and
// divides the rate's scale: rate0 -> c rate0, so every level's rate per new unit is
// the old one over c.
#[test]
fn gamma_fit_follows_the_exposure_s_units() {
    let mut g = SplitMix(17);
    let levels: Vec<(f64, f64)> = (0..400)
        .map(|i| {
            let exposure = 0.5 + (i % 9) as f64;
            let rate = 1.5 * (0.5 + g.unit());
            ((rate * exposure + 3.0 * g.unit()).floor(), exposure)
        })
        .collect();
    let (base, _) = fit_gamma(&levels).unwrap();
    for c in [24.0, 1e-4, 1e5] {
        let scaled: Vec<(f64, f64)> = levels.iter().map(|&(y, t)| (y, t * c)).collect();
        let (p, _) = fit_gamma(&scaled).unwrap();
        assert!(
            (p.shape0 / base.shape0 - 1.0).abs() < 1e-6,
            "{c}: {p:?} {base:?}"
        );
        assert!(
            (p.rate0 / (c * base.rate0) - 1.0).abs() < 1e-6,
            "{c}: {p:?} {base:?}"
        );
    }
}

// Values and weights whose spread overflows 64-bit arithmetic (a mean of 1e149 with a
// weight of 1e6 beside a level near 0) are refused by the fit in words, not with a
// parameter the user never gave ("mu0 = NaN").
#[test]
fn an_overflowing_normal_fit_says_so() {
    let level = |values: &[(f64, f64)]| {
        let mut s = NigStats::default();
        values.iter().for_each(|&(y, w)| s.push(y, w));
        s
    };
    let levels = [level(&[(1e149, 1e6)]), level(&[(3.0, 1e-9), (0.5, 0.5)])];
    let message = fit_nig(&levels).unwrap_err().to_string();
    assert!(message.contains("too large for the prior fit"), "{message}");
    // Far apart but representable: fitted (pooled, one row per level).
    let (p, _) = fit_nig(&[level(&[(1e149, 1.0)]), level(&[(-1e149, 1.0)])]).unwrap();
    assert!(p.beta0.is_finite() && p.mu0 == 0.0, "{p:?}");
}

// One binary or class outcome per level says nothing about how far levels differ
// (its marginal likelihood does not depend on the strength): the fit sets the
// strength to the cap at the overall rate instead of returning wherever a search
// stopped. Counts differ: one count per level still shows over-dispersion.
#[test]
fn one_row_per_level_pools_binary_and_class_outcomes() {
    let mut g = SplitMix(16);
    let binary: Vec<(f64, f64)> = (0..500)
        .map(|_| ((g.unit() < 0.2) as u8 as f64, 1.0))
        .collect();
    let (p, r) = fit_beta(&binary).unwrap();
    let rate = binary.iter().map(|l| l.0).sum::<f64>() / 500.0;
    assert!((p.a0 + p.b0 - MAX_STRENGTH).abs() < 1.0, "{p:?}");
    assert!((p.a0 / (p.a0 + p.b0) - rate).abs() < 1e-9, "{p:?}");
    assert!(r.at_bound && r.unfitted.is_some(), "{r:?}");
    let classes: Vec<String> = ["a", "b", "c"].map(String::from).to_vec();
    let rows: Vec<Vec<f64>> = (0..300)
        .map(|i| (0..3).map(|c| (c == i % 3) as u8 as f64).collect())
        .collect();
    let (p, r) = fit_dirichlet(&classes, &rows).unwrap();
    let total: f64 = p.alpha0.iter().sum();
    assert!((total - MAX_STRENGTH).abs() < 1.0, "{p:?}");
    assert!(p
        .alpha0
        .iter()
        .all(|a| (a / total - 1.0 / 3.0).abs() < 1e-9));
    assert!(r.unfitted.is_some());
    // Two rows in one level are enough to fit.
    let mut two = binary.clone();
    two[0] = (1.0, 2.0);
    assert_eq!(fit_beta(&two).unwrap().1.unfitted, None);
    // Counts: fitted, not pooled by rule.
    let counts: Vec<(f64, f64)> = (0..500).map(|i| ((i % 7) as f64, 1.0)).collect();
    assert_eq!(fit_gamma(&counts).unwrap().1.unfitted, None);
}

#[tokio::test]
async fn fit_prior_from_sql() {
    let ctx = datafusion::prelude::SessionContext::new();
    posterity::register(&ctx);
    let rows: Vec<String> = include_str!("../reference/betabinom_levels.csv")
        .lines()
        .skip(1)
        .enumerate()
        .map(|(i, l)| format!("({i}, {})", l))
        .collect();
    ctx.sql(&format!(
        "CREATE TABLE lv (level INT, s DOUBLE, n DOUBLE) AS VALUES {}",
        rows.join(", ")
    ))
    .await
    .unwrap()
    .collect()
    .await
    .unwrap();
    let sql = "SELECT posterior_mean(fit_prior(p)), fit_prior_report(p) FROM (SELECT level, beta_posterior_counts(s, n) AS p FROM lv GROUP BY level)";
    let batches = ctx.sql(sql).await.unwrap().collect().await.unwrap();
    use datafusion::arrow::array::AsArray;
    let mean = batches[0]
        .column(0)
        .as_primitive::<datafusion::arrow::datatypes::Float64Type>()
        .value(0);
    let report: serde_json::Value =
        serde_json::from_str(batches[0].column(1).as_string::<i32>().value(0)).unwrap();
    let (a, b) = (
        report["prior"]["a0"].as_f64().unwrap(),
        report["prior"]["b0"].as_f64().unwrap(),
    );
    assert!((mean - a / (a + b)).abs() < 1e-15);
    assert!((a / 3.057593736129589 - 1.0).abs() < 1e-6, "{report}");
    assert_eq!(report["levels"], 400);
    assert_eq!(report["converged"], true);
    // scipy's optimum: negative log-likelihood 1155.158... includes ln C(n, s), which
    // our Bernoulli-sequence convention leaves out, so only the sign is comparable.
    assert!(report["log_marginal_likelihood"].as_f64().unwrap() < 0.0);
}

/// `fit_strength` over the children of tests/reference/strength_levels.csv (each
/// child's posterior under a flat prior, its parent's from the parent's rows), for
/// binary outcomes and for counts with exposure, with `partitions` target partitions.
async fn fitted_strengths(partitions: usize) -> (f64, f64) {
    use datafusion::arrow::array::AsArray;
    use datafusion::arrow::datatypes::Float64Type;
    let ctx = datafusion::prelude::SessionContext::new_with_config(
        datafusion::prelude::SessionConfig::new().with_target_partitions(partitions),
    );
    posterity::register(&ctx);
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/strength_levels.csv"
    );
    ctx.register_csv("lv", path, Default::default())
        .await
        .unwrap();
    let sql = "WITH kids AS (SELECT child, parent, \
               beta_posterior_counts(successes, trials, beta_prior(1, 1)) AS b, \
               gamma_posterior(events, exposure, gamma_prior(1, 1)) AS g FROM lv GROUP BY child, parent), \
               parents AS (SELECT parent, beta_posterior_counts(successes, trials, beta_prior(1, 1)) AS b, \
               gamma_posterior(events, exposure, gamma_prior(1, 1)) AS g FROM lv GROUP BY parent) \
               SELECT fit_strength(k.b, p.b, k.b), fit_strength(k.g, p.g, k.g) FROM kids k JOIN parents p USING (parent)";
    let batches = ctx.sql(sql).await.unwrap().collect().await.unwrap();
    let value = |c: usize| batches[0].column(c).as_primitive::<Float64Type>().value(0);
    (value(0), value(1))
}

// Reference: scipy.stats.betabinom / nbinom + scipy.optimize on a committed data set
// (tests/reference/generate_strength.py; its output in strength_fit.csv). The data
// were drawn with strength 25, so the fits must also lie near it; and rows in any
// partitioning give the same bits.
#[tokio::test]
async fn fit_strength_matches_scipy() {
    let reference: std::collections::HashMap<&str, f64> =
        include_str!("../reference/strength_fit.csv")
            .lines()
            .skip(2)
            .map(|l| {
                let (family, s) = l.split_once(',').unwrap();
                (family, s.parse().unwrap())
            })
            .collect();
    let (beta, gamma) = fitted_strengths(1).await;
    for (family, got) in [("beta", beta), ("gamma", gamma)] {
        let want = reference[family];
        assert!(
            ((got - want) / want).abs() < 1e-6,
            "{family}: {got} vs scipy {want}"
        );
        assert!(
            (15.0..40.0).contains(&got),
            "{family}: {got} far from the true 25"
        );
    }
    assert_eq!(fitted_strengths(4).await, (beta, gamma));
}
