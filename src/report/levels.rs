//! What the report draws, as numbers: one panel per encoded column (one per class
//! for a Dirichlet column), each level's amount of data, raw in-sample value and
//! posterior mean with its 90 % interval, and the choice of levels worth drawing.

use crate::family::{FamilyError, Marginal};
use crate::layout::AnyPosterior;

/// Lower and upper interval probabilities: a 90 % central interval.
pub const INTERVAL: (f64, f64) = (0.05, 0.95);

/// One level of a panel.
#[derive(Debug, Clone, PartialEq)]
pub struct LevelPoint {
    pub label: String,
    /// The amount of data behind the level (rows, or exposure for rates).
    pub data: f64,
    /// The level's own in-sample value (rate, mean or class share); `None` without data.
    pub raw: Option<f64>,
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
}

/// The levels of one column (and class) on one scale.
#[derive(Debug, Clone)]
pub struct Panel {
    /// `breed`, or `breed · class cat` for a Dirichlet class.
    pub title: String,
    /// What the horizontal axis measures, in the target's words.
    pub axis: String,
    /// The prior's marginal on the same scale as the levels.
    pub prior: Marginal,
    /// Every level, in the order given (sorted by label in the report).
    pub levels: Vec<LevelPoint>,
}

/// The panels of one encoded column (or query result): one, or one per class for
/// a Dirichlet prior. `levels` are (label, posterior) pairs in the order to keep.
pub fn panels_of(
    column: &str,
    target: &str,
    prior: &AnyPosterior,
    levels: &[(&str, &AnyPosterior)],
) -> Result<Vec<Panel>, FamilyError> {
    let classes: Vec<Option<String>> = match prior {
        AnyPosterior::Dirichlet(d) => d.prior.classes.iter().cloned().map(Some).collect(),
        _ => vec![None],
    };
    classes
        .into_iter()
        .map(|class| {
            let class = class.as_deref();
            let points = levels
                .iter()
                .map(|(label, p)| level_point(label, p, class))
                .collect::<Result<Vec<_>, _>>()?;
            Ok(Panel {
                title: match class {
                    Some(c) => format!("{column} · class {c}"),
                    None => column.to_string(),
                },
                axis: axis_label(prior, target, class),
                prior: prior.marginal(class)?,
                levels: points,
            })
        })
        .collect()
}

/// Interval and raw value of one level, straight from its posterior.
pub fn level_point(
    label: &str,
    p: &AnyPosterior,
    class: Option<&str>,
) -> Result<LevelPoint, FamilyError> {
    let m = p.marginal(class)?;
    Ok(LevelPoint {
        label: label.to_string(),
        data: p.evidence(),
        raw: raw_value(p, class)?,
        mean: m.mean(),
        lower: m.quantile(INTERVAL.0),
        upper: m.quantile(INTERVAL.1),
    })
}

/// The level's own value from its data alone: successes per trial, events per unit
/// of exposure, the sample mean, or the class's share of the level's rows.
fn raw_value(p: &AnyPosterior, class: Option<&str>) -> Result<Option<f64>, FamilyError> {
    let ratio = |num: f64, den: f64| (den > 0.0).then(|| num / den);
    Ok(match p {
        AnyPosterior::Beta(b) => ratio(b.successes, b.trials),
        AnyPosterior::Gamma(g) => ratio(g.events, g.exposure),
        AnyPosterior::Nig(n) => (n.stats.n > 0.0).then_some(n.stats.mean),
        AnyPosterior::Dirichlet(d) => {
            let k = match class {
                Some(c) => d.prior.index_of(c)?,
                None => return Ok(None),
            };
            ratio(d.counts[k], d.counts.iter().sum())
        }
    })
}

fn axis_label(prior: &AnyPosterior, target: &str, class: Option<&str>) -> String {
    match prior {
        AnyPosterior::Beta(_) => format!("{target}: probability per row"),
        AnyPosterior::Gamma(_) => format!("{target}: rate per unit of exposure"),
        AnyPosterior::Nig(_) => format!("{target}: level mean (in units of the target)"),
        AnyPosterior::Dirichlet(_) => {
            format!("{target}: probability of class {}", class.unwrap_or("?"))
        }
    }
}

/// Indices of the levels worth an interval each, sorted by posterior mean (highest
/// first): the `most_data` levels with the most data, and the `extremes` levels with
/// the highest lower bound (reliably high) and with the lowest upper bound (reliably
/// low). Ties go to the label, so the same levels give the same picture.
pub fn interval_selection(levels: &[LevelPoint], most_data: usize, extremes: usize) -> Vec<usize> {
    let by = |key: &dyn Fn(&LevelPoint) -> f64, count: usize| -> Vec<usize> {
        let mut order: Vec<usize> = (0..levels.len()).collect();
        order.sort_by(|&a, &b| {
            key(&levels[b])
                .total_cmp(&key(&levels[a]))
                .then_with(|| levels[a].label.cmp(&levels[b].label))
        });
        order.truncate(count);
        order
    };
    let mut chosen = by(&|l| l.data, most_data);
    chosen.extend(by(&|l| l.lower, extremes));
    chosen.extend(by(&|l| -l.upper, extremes));
    chosen.sort_unstable();
    chosen.dedup();
    chosen.sort_by(|&a, &b| {
        levels[b]
            .mean
            .total_cmp(&levels[a].mean)
            .then_with(|| levels[a].label.cmp(&levels[b].label))
    });
    chosen
}

/// At most `limit` levels for a scatter: the half with the most data, then every
/// n-th of the rest in label order (deterministic, spread over the whole range).
pub fn scatter_selection(levels: &[LevelPoint], limit: usize) -> Vec<usize> {
    if levels.len() <= limit {
        return (0..levels.len()).collect();
    }
    let mut by_data: Vec<usize> = (0..levels.len()).collect();
    by_data.sort_by(|&a, &b| {
        levels[b]
            .data
            .total_cmp(&levels[a].data)
            .then_with(|| levels[a].label.cmp(&levels[b].label))
    });
    let (large, rest) = by_data.split_at(limit / 2);
    let mut rest = rest.to_vec();
    rest.sort_unstable();
    let step = rest.len() as f64 / (limit - large.len()) as f64;
    let mut chosen = large.to_vec();
    chosen.extend((0..limit - large.len()).map(|i| rest[(i as f64 * step) as usize]));
    chosen.sort_unstable();
    chosen
}

/// How many levels have less data than each threshold (1, 10, 100, 1,000 rows).
pub fn data_counts(levels: &[LevelPoint]) -> [(f64, usize); 4] {
    [1.0, 10.0, 100.0, 1000.0].map(|t| (t, levels.iter().filter(|l| l.data < t).count()))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::family::beta::{BetaPosterior, BetaPrior};

    fn beta(successes: f64, trials: f64) -> AnyPosterior {
        let mut p = BetaPosterior::new(BetaPrior::new(2.0, 18.0).unwrap());
        p.observe_counts(successes, trials).unwrap();
        AnyPosterior::Beta(p)
    }

    fn panel(levels: &[(&str, f64, f64)]) -> Panel {
        let posteriors: Vec<AnyPosterior> = levels.iter().map(|(_, s, n)| beta(*s, *n)).collect();
        let pairs: Vec<(&str, &AnyPosterior)> =
            levels.iter().map(|l| l.0).zip(posteriors.iter()).collect();
        panels_of("clinic", "no_show", &beta(0.0, 0.0), &pairs)
            .unwrap()
            .remove(0)
    }

    #[test]
    fn raw_rates_and_intervals_come_from_each_level() {
        let p = panel(&[("a", 0.0, 10.0), ("b", 10.0, 10.0), ("c", 0.0, 0.0)]);
        assert_eq!(p.levels[0].raw, Some(0.0));
        assert_eq!(p.levels[1].raw, Some(1.0));
        assert_eq!(p.levels[2].raw, None, "no data, no raw rate");
        for l in &p.levels {
            assert!(l.lower < l.mean && l.mean < l.upper, "{l:?}");
        }
        // Beta(2, 28) for a: mean 2/30.
        assert!((p.levels[0].mean - 2.0 / 30.0).abs() < 1e-15);
    }

    #[test]
    fn the_selection_keeps_big_and_extreme_levels_sorted_by_mean() {
        let mut levels = vec![
            ("big", 100.0, 1000.0),
            ("high", 40.0, 50.0),
            ("low", 0.0, 300.0),
        ];
        let names: Vec<String> = (0..50).map(|i| format!("small{i:02}")).collect();
        for n in &names {
            levels.push((n.as_str(), 1.0, 5.0));
        }
        let p = panel(&levels);
        let chosen = interval_selection(&p.levels, 1, 1);
        let labels: Vec<&str> = chosen.iter().map(|&i| p.levels[i].label.as_str()).collect();
        assert_eq!(labels, ["high", "big", "low"]);
        let again = interval_selection(&p.levels, 1, 1);
        assert_eq!(chosen, again);
    }

    #[test]
    fn scatter_selection_is_capped_and_keeps_the_largest() {
        let levels: Vec<LevelPoint> = (0..1000)
            .map(|i| LevelPoint {
                label: format!("l{i:04}"),
                data: i as f64,
                raw: Some(0.1),
                mean: 0.1,
                lower: 0.0,
                upper: 0.2,
            })
            .collect();
        let chosen = scatter_selection(&levels, 100);
        assert_eq!(chosen.len(), 100);
        assert!(chosen.contains(&999) && chosen.contains(&950));
        let mut unique = chosen.clone();
        unique.dedup();
        assert_eq!(unique.len(), 100);
        assert_eq!(scatter_selection(&levels[..50], 100).len(), 50);
    }

    #[test]
    fn data_counts_are_cumulative() {
        let p = panel(&[
            ("a", 0.0, 0.0),
            ("b", 0.0, 5.0),
            ("c", 1.0, 50.0),
            ("d", 0.0, 5000.0),
        ]);
        assert_eq!(
            data_counts(&p.levels),
            [(1.0, 1), (10.0, 2), (100.0, 3), (1000.0, 3)]
        );
    }
}
