//! The report's three pictures as SVG text, drawn with plotters' SVG backend (no
//! font files: text stays text, the browser sets it).
//!
//! Visual language: one dark blue (#0072B2) for levels, vermillion (#D55E00) for
//! the prior, grey for references; both colours are from the Okabe–Ito palette,
//! which stays distinct for the common colour-vision deficiencies, and they differ
//! in lightness and in stroke (solid levels, dashed prior), so a grayscale print
//! reads the same.

use plotters::coord::ranged1d::SegmentValue;
use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;

use super::levels::{LevelPoint, Panel};
use crate::family::Marginal;
use crate::render::short;

const LEVEL: RGBColor = RGBColor(0x00, 0x72, 0xB2);
const PRIOR: RGBColor = RGBColor(0xD5, 0x5E, 0x00);
const REFERENCE: RGBColor = RGBColor(0x66, 0x66, 0x66);
const WIDTH: u32 = 760;
const FONT: &str = "sans-serif";
/// Level names longer than this are cut (with an ellipsis) in axis labels.
const LABEL_CHARS: usize = 28;

type Result<T> = std::result::Result<T, String>;

fn failed<E: std::fmt::Debug>(e: E) -> String {
    format!("drawing failed: {e:?}")
}

/// Marker radius in pixels for a level with `data` rows: grows with the order of
/// magnitude, so 10 and 10,000 rows are both visible.
fn radius(data: f64) -> i32 {
    (2.0 + 1.5 * (1.0 + data.max(0.0)).log10()).round().min(9.0) as i32
}

fn cut(label: &str) -> String {
    if label.chars().count() <= LABEL_CHARS {
        label.to_string()
    } else {
        let head: String = label.chars().take(LABEL_CHARS - 1).collect();
        format!("{head}…")
    }
}

/// A range holding every value, widened a little; a single value gets a window
/// around it so nothing is drawn on the frame.
fn span(values: impl Iterator<Item = f64>) -> (f64, f64) {
    let (lo, hi) = values
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    let width = hi - lo;
    let pad = if width > 0.0 {
        0.04 * width
    } else {
        0.05 * lo.abs().max(1e-3)
    };
    (lo - pad, hi + pad)
}

/// Posterior mean and 90 % interval of the chosen levels, one row each, marker size
/// by data, with the prior's mean as a dashed reference line; `title` on top when
/// the picture stands alone.
pub fn interval_svg(panel: &Panel, chosen: &[usize], title: Option<&str>) -> Result<String> {
    let shown: Vec<&LevelPoint> = chosen.iter().map(|&i| &panel.levels[i]).collect();
    let rows = shown.len().max(1) as i32;
    let prior_mean = panel.prior.mean();
    let (x0, x1) = span(
        shown
            .iter()
            .flat_map(|l| [l.lower, l.upper])
            .chain([prior_mean]),
    );
    let height = 90 + 20 * rows as u32 + if title.is_some() { 30 } else { 0 };
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, height)).into_drawing_area();
        root.fill(&WHITE).map_err(failed)?;
        let mut builder = ChartBuilder::on(&root);
        if let Some(title) = title {
            builder.caption(title, (FONT, 15));
        }
        let mut chart = builder
            .margin(10)
            .x_label_area_size(40)
            .y_label_area_size(200)
            .build_cartesian_2d(x0..x1, (0..rows - 1).into_segmented())
            .map_err(failed)?;
        // Row 0 is drawn at the bottom: the first level goes on the top row.
        let row = |i: usize| rows - 1 - i as i32;
        let labels: Vec<String> = shown.iter().rev().map(|l| cut(&l.label)).collect();
        let label_of = |v: &SegmentValue<i32>| match v {
            SegmentValue::CenterOf(i) | SegmentValue::Exact(i) => {
                labels.get(*i as usize).cloned().unwrap_or_default()
            }
            SegmentValue::Last => String::new(),
        };
        chart
            .configure_mesh()
            .disable_y_mesh()
            .y_labels(rows as usize)
            .y_label_formatter(&label_of)
            .x_label_formatter(&|x| short(*x))
            .x_desc(panel.axis.as_str())
            .label_style((FONT, 12))
            .axis_desc_style((FONT, 13))
            .max_light_lines(2)
            .light_line_style(RGBColor(0xEE, 0xEE, 0xEE))
            .draw()
            .map_err(failed)?;
        let at = |i: usize| SegmentValue::CenterOf(row(i));
        chart
            .draw_series(DashedLineSeries::new(
                [
                    (prior_mean, SegmentValue::Exact(0)),
                    (prior_mean, SegmentValue::Last),
                ],
                6,
                4,
                PRIOR.stroke_width(2),
            ))
            .map_err(failed)?;
        chart
            .draw_series(shown.iter().enumerate().map(|(i, l)| {
                PathElement::new(
                    vec![(l.lower, at(i)), (l.upper, at(i))],
                    LEVEL.stroke_width(2),
                )
            }))
            .map_err(failed)?;
        chart
            .draw_series(
                shown
                    .iter()
                    .enumerate()
                    .map(|(i, l)| Circle::new((l.mean, at(i)), radius(l.data), LEVEL.filled())),
            )
            .map_err(failed)?;
        root.present().map_err(failed)?;
    }
    Ok(svg)
}

type ValueChart<'a, 'b> =
    ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// Axes, labels and a light grid for a chart with numbers on both axes.
fn value_mesh(chart: &mut ValueChart<'_, '_>, x_desc: &str, y_desc: &str) -> Result<()> {
    chart
        .configure_mesh()
        .x_desc(x_desc)
        .y_desc(y_desc)
        .x_label_formatter(&|x| short(*x))
        .y_label_formatter(&|y| short(*y))
        .label_style((FONT, 12))
        .axis_desc_style((FONT, 13))
        .max_light_lines(2)
        .light_line_style(RGBColor(0xEE, 0xEE, 0xEE))
        .draw()
        .map_err(failed)
}

/// Each level's raw in-sample value against its posterior mean, sized by data, with
/// the identity line: how far the prior pulled each level.
pub fn shrinkage_svg(panel: &Panel, chosen: &[usize]) -> Result<String> {
    let shown: Vec<(&LevelPoint, f64)> = chosen
        .iter()
        .map(|&i| &panel.levels[i])
        .filter_map(|l| l.raw.map(|r| (l, r)))
        .collect();
    let (lo, hi) = span(shown.iter().flat_map(|(l, raw)| [*raw, l.mean]));
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, 460)).into_drawing_area();
        root.fill(&WHITE).map_err(failed)?;
        let mut chart = ChartBuilder::on(&root)
            .margin(10)
            .x_label_area_size(40)
            .y_label_area_size(70)
            .build_cartesian_2d(lo..hi, lo..hi)
            .map_err(failed)?;
        value_mesh(
            &mut chart,
            &format!("raw in-sample value — {}", panel.axis),
            "posterior mean",
        )?;
        chart
            .draw_series(DashedLineSeries::new(
                [(lo, lo), (hi, hi)],
                6,
                4,
                REFERENCE.stroke_width(1),
            ))
            .map_err(failed)?;
        chart
            .draw_series(DashedLineSeries::new(
                [(lo, panel.prior.mean()), (hi, panel.prior.mean())],
                6,
                4,
                PRIOR.stroke_width(2),
            ))
            .map_err(failed)?;
        chart
            .draw_series(shown.iter().map(|(l, raw)| {
                Circle::new((*raw, l.mean), radius(l.data), LEVEL.mix(0.45).filled())
            }))
            .map_err(failed)?;
        root.present().map_err(failed)?;
    }
    Ok(svg)
}

/// Bins of the histogram of level means.
const BINS: usize = 30;
/// Points on the prior's density curve.
const CURVE_POINTS: usize = 240;

/// The prior's density over a histogram (as a density) of `means`, the raw means
/// of the levels the caller chose: does the prior fit the spread of the levels?
pub fn prior_svg(panel: &Panel, means: &[f64]) -> Result<String> {
    let prior = panel.prior;
    let tails = [prior.quantile(0.005), prior.quantile(0.995)];
    let (mut x0, mut x1) = span(means.iter().copied().chain(tails));
    if let Marginal::Beta { .. } = prior {
        (x0, x1) = (x0.max(0.0), x1.min(1.0));
    }
    if let Marginal::Gamma { .. } = prior {
        x0 = x0.max(0.0);
    }
    let width = (x1 - x0) / BINS as f64;
    let mut counts = [0usize; BINS];
    for m in means {
        let bin = (((m - x0) / width) as usize).min(BINS - 1);
        counts[bin] += 1;
    }
    let scale = 1.0 / (means.len().max(1) as f64 * width);
    let bars: Vec<f64> = counts.iter().map(|&c| c as f64 * scale).collect();
    let curve: Vec<(f64, f64)> = (0..=CURVE_POINTS)
        .map(|i| {
            let x = x0 + (x1 - x0) * i as f64 / CURVE_POINTS as f64;
            (x, prior.density(x))
        })
        .collect();
    // A density with a pole at the edge (Beta with a parameter below 1) must not
    // flatten everything else: the height follows the bars and the curve's interior.
    let interior = curve[2..curve.len() - 2]
        .iter()
        .map(|p| p.1)
        .fold(0.0f64, f64::max);
    let top = 1.1 * bars.iter().copied().fold(interior, f64::max).max(1e-12);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, 340)).into_drawing_area();
        root.fill(&WHITE).map_err(failed)?;
        let mut chart = ChartBuilder::on(&root)
            .margin(10)
            .x_label_area_size(40)
            .y_label_area_size(70)
            .build_cartesian_2d(x0..x1, 0.0..top)
            .map_err(failed)?;
        value_mesh(&mut chart, &panel.axis, "density")?;
        chart
            .draw_series(bars.iter().enumerate().map(|(i, &h)| {
                let left = x0 + i as f64 * width;
                Rectangle::new(
                    [(left, 0.0), (left + width, h.min(top))],
                    LEVEL.mix(0.35).filled(),
                )
            }))
            .map_err(failed)?;
        chart
            .draw_series(DashedLineSeries::new(
                curve.into_iter().map(|(x, d)| (x, d.min(top))),
                8,
                3,
                PRIOR.stroke_width(2),
            ))
            .map_err(failed)?;
        root.present().map_err(failed)?;
    }
    Ok(svg)
}
