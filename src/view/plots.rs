//! The report's plots, each an SVG document drawn by plotters: shrinkage,
//! funnel, the prior over the raw rates (or, with covariates, the raw rates
//! against each group's prior centre), calibration, pool weights.

use super::collect::{GroupRow, POOL_BINS};
use crate::core::model::{ModelTerms, RateLaw};
use crate::error::{Error, Result};
use plotters::coord::Shift;
use plotters::prelude::*;

/// Width and height of every plot, in pixels.
const SIZE: (u32, u32) = (640, 400);
/// The 95% and 99.8% two-sided normal points (common practice: Spiegelhalter's funnel limits).
const LIMITS: [(f64, &str); 2] = [(1.959_963_984_540_054, "95%"), (3.090_232_306_167_813_5, "99.8%")];
const POINT: RGBColor = RGBColor(44, 95, 138);
const FLAG: RGBColor = RGBColor(196, 54, 44);
const LINE: RGBColor = RGBColor(90, 90, 90);

type Area<'a> = DrawingArea<SVGBackend<'a>, Shift>;
type Drawn = std::result::Result<(), Box<dyn std::error::Error>>;

/// Draws onto a fresh white canvas and returns the SVG text.
fn svg(draw: impl FnOnce(&Area<'_>) -> Drawn) -> Result<String> {
    let mut text = String::new();
    {
        let root = SVGBackend::with_string(&mut text, SIZE).into_drawing_area();
        let fail = |e: Box<dyn std::error::Error>| Error::Other(format!("cannot draw a plot: {e}"));
        root.fill(&WHITE).map_err(|e| fail(e.into()))?;
        draw(&root).map_err(fail)?;
        root.present().map_err(|e| fail(e.into()))?;
    }
    Ok(text)
}

/// An axis label: a whole number without ".0" (`50`, not `50.0`), others
/// to six decimals at most with trailing zeros dropped, tiny ones in
/// scientific notation.
fn tick(value: &f64) -> String {
    let v = *value;
    if v == v.trunc() && v.abs() < 1e15 {
        return format!("{v:.0}");
    }
    if v.abs() < 1e-3 {
        return format!("{v:.1e}");
    }
    let text = format!("{v:.6}");
    text.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// A range holding every value, padded by 4%; widened when it is a point.
fn span(values: impl Iterator<Item = f64>) -> (f64, f64) {
    let (mut low, mut high) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values.filter(|v| v.is_finite()) {
        low = low.min(v);
        high = high.max(v);
    }
    if !low.is_finite() {
        return (0.0, 1.0);
    }
    let pad = if high > low { 0.04 * (high - low) } else { 0.5 * low.abs().max(1e-9) };
    (low - pad, high + pad)
}

/// Marker radius by size, 1.5 to 7 pixels on a log scale of `largest`.
fn radius(size: f64, largest: f64) -> i32 {
    let share = (1.0 + size.max(0.0)).ln() / (1.0 + largest.max(1.0)).ln();
    (1.5 + 5.5 * share).round() as i32
}

/// Raw rate against posterior mean, marker size by the group's size: small
/// groups move toward the prior mean, large ones stay on the diagonal.
pub fn shrinkage(sample: &[GroupRow], prior_mean: f64, terms: &ModelTerms) -> Result<String> {
    let points: Vec<(f64, f64, f64)> = sample
        .iter()
        .filter_map(|g| g.raw.map(|raw| (raw, g.mean, terms.plots.funnel_x.x(g.size))))
        .collect();
    diagonal_scatter(&points, (terms.plots.raw_label, "posterior mean"), Some(prior_mean))
}

/// A star-rating run's raw mean score against its posterior mean, marker
/// size by the number of ratings (points are (raw, posterior, ratings)).
pub fn mean_score_shrinkage(points: &[(f64, f64, f64)], prior_mean: f64) -> Result<String> {
    diagonal_scatter(points, ("raw mean score", "posterior mean score"), Some(prior_mean))
}

/// Raw rate against each group's prior centre (with covariates), marker
/// size by the group's size: groups on the diagonal are what their
/// covariates predict; the spread about it is what the prior's strength allows.
pub fn raw_against_centre(sample: &[GroupRow], terms: &ModelTerms) -> Result<String> {
    let points: Vec<(f64, f64, f64)> =
        sample.iter().filter_map(|g| Some((g.centre?, g.raw?, terms.plots.funnel_x.x(g.size)))).collect();
    diagonal_scatter(&points, ("prior centre (prior_mean)", terms.plots.raw_label), None)
}

/// Points (x, y, size) on square axes with the diagonal, and a horizontal
/// line at `level` when given; marker size by the group's size.
fn diagonal_scatter(
    points: &[(f64, f64, f64)],
    (x_desc, y_desc): (&str, &str),
    level: Option<f64>,
) -> Result<String> {
    let (low, high) = span(points.iter().flat_map(|p| [p.0, p.1]).chain(level));
    let largest = points.iter().map(|p| p.2).fold(0.0, f64::max);
    svg(|root| {
        let mut chart = ChartBuilder::on(root)
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(60)
            .build_cartesian_2d(low..high, low..high)?;
        chart
            .configure_mesh()
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .x_desc(x_desc)
            .y_desc(y_desc)
            .light_line_style(WHITE)
            .draw()?;
        chart.draw_series(LineSeries::new([(low, low), (high, high)], LINE.stroke_width(1)))?;
        if let Some(level) = level {
            chart
                .draw_series(LineSeries::new([(low, level), (high, level)], LINE.mix(0.5).stroke_width(1)))?;
        }
        chart.draw_series(
            points.iter().map(|&(x, y, n)| Circle::new((x, y), radius(n, largest), POINT.mix(0.35).filled())),
        )?;
        Ok(())
    })
}

/// The funnel's control limits at abscissa `x` (size, or precision for estimates)
/// around the pooled rate, `z` standard errors out.
pub fn funnel_limit(terms: &ModelTerms, pooled: f64, x: f64, z: f64) -> (f64, f64) {
    let se = ((terms.plots.unit_variance)(pooled) / x).sqrt();
    terms.rates.clamp((pooled - z * se, pooled + z * se))
}

/// Spiegelhalter's funnel plot: raw rate against size (log axis) with the
/// pooled rate and its 95% and 99.8% limits; flagged groups in red.
pub fn funnel(
    sample: &[GroupRow],
    flagged: &[&GroupRow],
    (terms, pooled): (&ModelTerms, f64),
    x_range: (f64, f64),
) -> Result<String> {
    let point =
        |g: &GroupRow| g.raw.map(|raw| (terms.plots.funnel_x.x(g.size), raw)).filter(|(x, _)| *x > 0.0);
    let plain: Vec<(f64, f64)> = sample.iter().filter(|g| !g.flagged).filter_map(point).collect();
    let marked: Vec<(f64, f64)> =
        sample.iter().filter(|g| g.flagged).chain(flagged.iter().copied()).filter_map(point).collect();
    let (x_low, x_high) = if x_range.0 < x_range.1 { x_range } else { (x_range.0 * 0.5, x_range.0 * 2.0) };
    let grid: Vec<f64> = (0..=200).map(|i| x_low * (x_high / x_low).powf(f64::from(i) / 200.0)).collect();
    let inner = funnel_limit(terms, pooled, grid[grid.len() / 20], LIMITS[1].0);
    let (y_low, y_high) = span(plain.iter().chain(&marked).map(|p| p.1).chain([inner.0, inner.1, pooled]));
    svg(|root| {
        let mut chart = ChartBuilder::on(root)
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(60)
            .build_cartesian_2d((x_low..x_high).log_scale(), y_low..y_high)?;
        chart
            .configure_mesh()
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .x_desc(terms.plots.funnel_axis)
            .y_desc(terms.plots.raw_label)
            .light_line_style(WHITE)
            .draw()?;
        chart.draw_series(plain.iter().map(|&p| Circle::new(p, 2, POINT.mix(0.35).filled())))?;
        chart.draw_series(LineSeries::new(grid.iter().map(|&x| (x, pooled)), LINE.stroke_width(2)))?;
        for (z, _) in LIMITS {
            let style = if z < 2.5 { LINE.stroke_width(1) } else { LINE.mix(0.6).stroke_width(1) };
            for side in [0, 1] {
                let curve = grid.iter().map(|&x| {
                    let (low, high) = funnel_limit(terms, pooled, x, z);
                    (x, if side == 0 { low } else { high }.clamp(y_low, y_high))
                });
                chart.draw_series(LineSeries::new(curve, style))?;
            }
        }
        chart.draw_series(marked.iter().map(|&p| Circle::new(p, 3, FLAG.filled())))?;
        Ok(())
    })
}

/// Counts over equal bins of [low, high] (values outside go to the end bins).
pub fn bin(values: &[f64], (low, high): (f64, f64), bins: usize) -> Vec<u64> {
    let mut counts = vec![0u64; bins];
    for v in values.iter().filter(|v| v.is_finite()) {
        let at = ((v - low) / (high - low) * bins as f64).floor().clamp(0.0, (bins - 1) as f64) as usize;
        counts[at] += 1;
    }
    counts
}

/// Bars of `counts` over equal bins of [low, high], scaled by `scale`.
fn bars(counts: &[u64], (low, high): (f64, f64), scale: f64) -> Vec<Rectangle<(f64, f64)>> {
    let width = (high - low) / counts.len() as f64;
    counts
        .iter()
        .enumerate()
        .map(|(i, &c)| {
            let left = low + i as f64 * width;
            Rectangle::new([(left, 0.0), (left + width, c as f64 * scale)], POINT.mix(0.45).filled())
        })
        .collect()
}

/// What the prior plot draws over the histogram.
pub enum PriorShown<'a> {
    /// A law's density.
    Law(RateLaw),
    /// Complete pooling: a line at the pooled value.
    Pooled(f64),
    /// A free prior's support as [rate, mass] (each drawn as a bar of its
    /// mass over one histogram bin's width, so it reads on the histogram's
    /// scale), with the parametric prior fitted beside it as a line.
    Free {
        /// The points holding a share of the mass worth showing.
        support: &'a [[f64; 2]],
        /// The parametric prior's law, when it was fitted.
        parametric: Option<RateLaw>,
    },
}

/// The histogram of the raw rates of well-measured groups, as a density,
/// under the fitted prior: its density, the pooled rate at complete
/// pooling, or a free prior's masses beside the parametric prior's density.
pub fn prior_over_raw(raw: &[f64], shown: &PriorShown<'_>, terms: &ModelTerms) -> Result<String> {
    const BINS: usize = 40;
    let marks: Vec<f64> = match shown {
        PriorShown::Pooled(at) => vec![*at],
        PriorShown::Free { support, .. } => support.iter().map(|p| p[0]).collect(),
        PriorShown::Law(_) => Vec::new(),
    };
    let (mut low, mut high) = span(raw.iter().copied().chain(marks));
    if !matches!(shown, PriorShown::Pooled(_)) {
        (low, high) = terms.rates.clamp((low, high));
    }
    let counts = bin(raw, (low, high), BINS);
    let bin_width = (high - low) / BINS as f64;
    let scale = 1.0 / (raw.len().max(1) as f64 * bin_width);
    let curve_of = |law: &RateLaw| -> Vec<(f64, f64)> {
        (0..=300)
            .map(|i| low + (high - low) * f64::from(i) / 300.0)
            .map(|x| (x, law.density(x)))
            .filter(|p| p.1.is_finite())
            .collect()
    };
    let curve = match shown {
        PriorShown::Law(law) | PriorShown::Free { parametric: Some(law), .. } => curve_of(law),
        _ => Vec::new(),
    };
    let stems: Vec<(f64, f64)> = match shown {
        PriorShown::Free { support, .. } => support.iter().map(|p| (p[0], p[1] / bin_width)).collect(),
        _ => Vec::new(),
    };
    let top = counts
        .iter()
        .map(|&c| c as f64 * scale)
        .chain(curve.iter().map(|p| p.1))
        .chain(stems.iter().map(|p| p.1))
        .fold(0.0, f64::max);
    let top = if top > 0.0 { top * 1.08 } else { 1.0 };
    svg(|root| {
        let mut chart = ChartBuilder::on(root)
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(60)
            .build_cartesian_2d(low..high, 0.0..top)?;
        chart
            .configure_mesh()
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .x_desc(terms.plots.raw_label)
            .y_desc("density")
            .light_line_style(WHITE)
            .draw()?;
        chart.draw_series(bars(&counts, (low, high), scale))?;
        match shown {
            PriorShown::Pooled(at) => {
                chart.draw_series(LineSeries::new([(*at, 0.0), (*at, top)], FLAG.stroke_width(2)))?;
            }
            PriorShown::Law(_) => {
                chart.draw_series(LineSeries::new(curve, FLAG.stroke_width(2)))?;
            }
            PriorShown::Free { .. } => {
                chart.draw_series(LineSeries::new(curve, LINE.stroke_width(2)))?;
                chart.draw_series(
                    stems
                        .iter()
                        .map(|&(x, h)| PathElement::new(vec![(x, 0.0), (x, h)], FLAG.stroke_width(3))),
                )?;
            }
        }
        Ok(())
    })
}

/// The calibration histogram: the groups in each tenth of their prior
/// predictive distribution, with the count expected when the model holds.
pub fn calibration(bins: &[u64]) -> Result<String> {
    let total: u64 = bins.iter().sum();
    let expected = total as f64 / bins.len().max(1) as f64;
    let top = bins.iter().map(|&b| b as f64).fold(expected, f64::max) * 1.12;
    svg(|root| {
        let mut chart = ChartBuilder::on(root)
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(60)
            .build_cartesian_2d(0.0..1.0, 0.0..top.max(1.0))?;
        chart
            .configure_mesh()
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .x_desc("place in the prior predictive distribution (randomised PIT)")
            .y_desc("groups")
            .light_line_style(WHITE)
            .draw()?;
        chart.draw_series(bars(bins, (0.0, 1.0), 1.0))?;
        chart.draw_series(LineSeries::new([(0.0, expected), (1.0, expected)], FLAG.stroke_width(2)))?;
        Ok(())
    })
}

/// The distribution of pool weights over [0, 1].
pub fn pool_weights(counts: &[u64]) -> Result<String> {
    debug_assert_eq!(counts.len(), POOL_BINS);
    let top = counts.iter().copied().max().unwrap_or(1).max(1) as f64 * 1.1;
    svg(|root| {
        let mut chart = ChartBuilder::on(root)
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(70)
            .build_cartesian_2d(0.0..1.0, 0.0..top)?;
        chart
            .configure_mesh()
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .x_desc("pool weight (0: own data only, 1: the prior only)")
            .y_desc("groups")
            .light_line_style(WHITE)
            .draw()?;
        chart.draw_series(bars(counts, (0.0, 1.0), 1.0))?;
        Ok(())
    })
}

/// A plot's SVG rasterised to PNG at its own size, its text set in the
/// bundled DejaVu Sans (the same bytes on every machine).
pub fn to_png(svg: &str) -> Result<Vec<u8>> {
    use resvg::{tiny_skia, usvg};
    let fail = |what: &str| Error::Other(format!("cannot draw a plot as PNG: {what}"));
    let mut fonts = usvg::fontdb::Database::new();
    fonts.load_font_data(dejavu::sans::regular().to_vec());
    fonts.set_sans_serif_family("DejaVu Sans");
    let options = usvg::Options { fontdb: std::sync::Arc::new(fonts), ..Default::default() };
    let tree = usvg::Tree::from_str(svg, &options).map_err(|e| fail(&e.to_string()))?;
    let size = tree.size().to_int_size();
    let mut pixmap = tiny_skia::Pixmap::new(size.width(), size.height()).ok_or_else(|| fail("no canvas"))?;
    resvg::render(&tree, tiny_skia::Transform::default(), &mut pixmap.as_mut());
    pixmap.encode_png().map_err(|e| fail(&e.to_string()))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::model::Model;

    #[test]
    fn funnel_limits_are_the_binomial_and_poisson_ones() {
        // p0 ± z √(p0(1 − p0)/n) and θ0 ± z √(θ0/E) (Spiegelhalter, Statistics in Medicine 2005).
        let (low, high) = funnel_limit(Model::BetaBinomial.terms(), 0.2, 100.0, 2.0);
        assert!((low - 0.12).abs() < 1e-12 && (high - 0.28).abs() < 1e-12);
        let (low, high) = funnel_limit(Model::GammaPoisson.terms(), 1.0, 25.0, 2.0);
        assert!((low - 0.6).abs() < 1e-12 && (high - 1.4).abs() < 1e-12);
        // For estimates the abscissa is the precision 1/se²: se = 0.5 at x = 4.
        let (low, high) = funnel_limit(Model::NormalNormal.terms(), 3.0, 4.0, 2.0);
        assert!((low - 2.0).abs() < 1e-12 && (high - 4.0).abs() < 1e-12);
        // Proportions stay within [0, 1].
        assert_eq!(funnel_limit(Model::BetaBinomial.terms(), 0.05, 2.0, 3.0).0, 0.0);
    }

    #[test]
    fn axis_labels_drop_the_decimal_point_of_whole_numbers() {
        let labels: Vec<String> =
            [50.0, 0.0, 100.0, 0.5, 0.30000000000000004, 2.5e-5, -3.0].iter().map(tick).collect();
        assert_eq!(labels, ["50", "0", "100", "0.5", "0.3", "2.5e-5", "-3"]);
    }

    #[test]
    fn bins_put_outliers_in_the_end_bins() {
        assert_eq!(bin(&[-1.0, 0.05, 0.5, 0.99, 7.0, f64::NAN], (0.0, 1.0), 4), vec![2, 0, 1, 2]);
    }

    #[test]
    fn png_copies_are_pngs_of_the_plots_size() {
        let png = to_png(&calibration(&[10, 12, 9, 11, 10, 8, 10, 12, 9, 9]).unwrap()).unwrap();
        assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");
        // Width and height, big-endian, in the IHDR chunk (PNG specification).
        let width = u32::from_be_bytes([png[16], png[17], png[18], png[19]]);
        let height = u32::from_be_bytes([png[20], png[21], png[22], png[23]]);
        assert_eq!((width, height), SIZE);
    }

    #[test]
    fn plots_are_svg_documents_and_the_same_bytes_each_time() {
        let a = calibration(&[10, 12, 9, 11, 10, 8, 10, 12, 9, 9]).unwrap();
        assert!(a.starts_with("<svg") && a.trim_end().ends_with("</svg>"));
        assert_eq!(a, calibration(&[10, 12, 9, 11, 10, 8, 10, 12, 9, 9]).unwrap());
    }
}
