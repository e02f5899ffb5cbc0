//! The star-rating run's report page: drawn, like the other models' page,
//! from the run's output table and summary alone, in one pass over the
//! table in bounded memory (a seeded sample for the scatter plot, the few
//! sellers each table lists, histograms, and the observed level totals).

use super::collect::{
    count_pool_weight, missing_in_table, number_at, GroupRow, Listed, Reservoir, POOL_BINS, SAMPLE,
};
use super::page::{
    borrowed_caution, close_page, escape, flag_caution, listed_tables, num, open_page, plots_section,
    segment_test_line, warning_items, TableHeadings, TableWords, DISCLOSURE_CAUTION, RANKING_CAUTION,
};
use super::{plots, refuse_other_run, write_page, Figure, ReportRequest};
use crate::error::{Error, Result};
use crate::io::cells::{float_column, GroupColumn};
use crate::io::input::Input;
use crate::summary::{p_value_text, LevelSummary, VERDICT_POOR_FIT};
use arrow_array::Float64Array;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::fmt::Write;
use std::path::Path;

/// What one pass over a star-rating table keeps. A seller is a
/// [`GroupRow`] whose size is its number of ratings and whose raw value is
/// its raw mean score.
pub struct LevelCollected {
    /// Sellers read.
    pub groups: u64,
    /// Ratings read, in all.
    pub ratings: f64,
    /// Ratings at each level, summed over the sellers.
    pub level_totals: Vec<f64>,
    /// A seeded sample of sellers with ratings, for the scatter plot.
    pub sample: Vec<GroupRow>,
    /// The sellers the page's tables list.
    pub listed: Listed,
    /// Counts of pool weights in [`POOL_BINS`] equal bins over [0, 1].
    pub pool_weights: Vec<u64>,
}

/// Reads the output table of the star-rating run that `summary` describes.
pub fn collect_levels(table: &Path, summary: &LevelSummary, seed: u64) -> Result<LevelCollected> {
    let group = summary.group_column.as_deref().ok_or_else(|| {
        Error::Input(
            "the summary does not name the group column (written by an older ratepool); run the fit again"
                .into(),
        )
    })?;
    let mut wanted: Vec<(&str, &str)> = vec![(group, "group")];
    wanted.extend(summary.levels.iter().map(|l| (l.column.as_str(), "level count")));
    let first_posterior = wanted.len();
    wanted.extend([
        ("raw_mean", "raw mean score"),
        ("posterior_mean", "posterior mean"),
        ("interval_lo", "interval"),
        ("interval_hi", "interval"),
        ("pool_weight", "pool weight"),
    ]);
    let flag_bound = summary.flags.as_ref().map(|f| f.fdr_level);
    let event_column = summary.flags.as_ref().map(|f| format!("prob_{}", f.event));
    if let Some(event) = &event_column {
        wanted.extend([(event.as_str(), "event probability"), ("flag_fdr", "flag")]);
    }
    let levels = summary.levels.len();
    let input = Input::open(table, b',', &wanted, crate::pipeline::DEFAULT_BATCH_ROWS)?;
    let lowest_first = summary.rank_order.as_deref() == Some("lowest-first");
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut sample = Reservoir::new(SAMPLE);
    let mut out = LevelCollected {
        groups: 0,
        ratings: 0.0,
        level_totals: vec![0.0; levels],
        sample: Vec::new(),
        listed: Listed::new(lowest_first),
        pool_weights: vec![0; POOL_BINS],
    };
    input.for_each_batch(|batch| {
        let ids = GroupColumn::of(&batch.columns[0])?;
        let numbers: Vec<Float64Array> =
            batch.columns[1..].iter().map(float_column).collect::<Result<_>>()?;
        for row in 0..batch.rows() {
            let value = |i: usize| number_at(&numbers, i, row);
            let fault = |what: &str| missing_in_table(batch.file, batch.first_row_in_file + row, what);
            let mut ratings = 0.0;
            for (k, total) in out.level_totals.iter_mut().enumerate() {
                let count =
                    value(k).ok_or_else(|| fault(&format!("count of {}", summary.levels[k].column)))?;
                *total += count;
                ratings += count;
            }
            let at = first_posterior - 1;
            let (Some(mean), Some(lower), Some(upper), Some(pool_weight)) =
                (value(at + 1), value(at + 2), value(at + 3), value(at + 4))
            else {
                return Err(fault("posterior"));
            };
            let raw = value(at);
            let event_probability = event_column.as_ref().and_then(|_| value(at + 5));
            let flagged = flag_bound
                .zip(event_column.as_ref().and_then(|_| value(at + 6)))
                .is_some_and(|(q, fdr)| fdr <= q);
            out.groups += 1;
            out.ratings += ratings;
            let probe = GroupRow {
                id: String::new(),
                size: ratings,
                count: ratings,
                raw,
                mean,
                lower,
                upper,
                pool_weight,
                centre: None,
                event_probability,
                flagged,
                segment: 0,
            };
            let build = || GroupRow { id: ids.text(row), ..probe.clone() };
            count_pool_weight(&mut out.pool_weights, pool_weight);
            if raw.is_some() {
                if let Some(slot) = sample.slot(&mut rng) {
                    sample.put(slot, build());
                }
            }
            out.listed.offer(&probe, build);
        }
        Ok(())
    })?;
    out.sample = sample.items;
    Ok(out)
}

/// Writes the star-rating report (atomically) and, when asked, each plot
/// beside it; a map is refused.
pub fn write_level_report(request: &ReportRequest<'_, LevelSummary>) -> Result<()> {
    if request.map.is_some() {
        return Err(Error::Usage(format!(
            "--map does not apply to the {} model (yet)",
            request.summary.model
        )));
    }
    let summary = request.summary;
    let collected = collect_levels(request.table, summary, request.seed)?;
    refuse_other_run(request.table, collected.groups, summary.groups)?;
    let figures = level_figures(summary, &collected)?;
    let html = render_levels(summary, &collected, &figures);
    write_page(&html, figures.iter(), request.output, request.plots, request.plot_format)
}

/// The plots of a star-rating run.
pub fn level_figures(summary: &LevelSummary, collected: &LevelCollected) -> Result<Vec<Figure>> {
    let points: Vec<(f64, f64, f64)> =
        collected.sample.iter().filter_map(|g| g.raw.map(|raw| (raw, g.mean, g.size))).collect();
    let rated = collected.sample.len();
    let mut figures = vec![
        Figure {
            name: "shrinkage".to_string(),
            title: "Raw against posterior mean score".to_string(),
            caption: format!(
                "Each dot a seller with ratings ({rated} drawn with a fixed seed), sized by its number of ratings; the diagonal is no shrinkage, the horizontal line the {} prior's mean score {}. Sellers with few ratings sit near the line: their own ratings say little.",
                if summary.segments.is_some() { "all-sellers" } else { "fitted" },
                num(summary.mean_score)
            ),
            svg: plots::mean_score_shrinkage(&points, summary.mean_score)?,
        },
        Figure {
            name: "pool-weights".to_string(),
            title: "Pool weights".to_string(),
            caption: "How much of each seller's posterior mean shares comes from the prior: A / (A + N), with A the prior's strength and N the seller's ratings.".to_string(),
            svg: plots::pool_weights(&collected.pool_weights)?,
        },
    ];
    if let Some(checks) = &summary.checks {
        figures.push(Figure {
            name: "calibration".to_string(),
            title: "Calibration".to_string(),
            caption: format!(
                "Each seller's mean score placed among {} replicates drawn from its prior predictive, {} sellers of {}: the ten places are equally likely when the prior describes the sellers (the line). {}, chi-square {} on {} df, {}.",
                checks.replicates,
                checks.calibration.groups,
                checks.data,
                checks.verdict,
                num(checks.calibration.statistic),
                checks.calibration.degrees_of_freedom,
                p_value_text(checks.calibration.p_value)
            ),
            svg: plots::calibration(&checks.calibration.bins)?,
        });
    }
    Ok(figures)
}

/// The cautions of a star-rating run.
pub fn level_cautions(summary: &LevelSummary) -> Vec<String> {
    let mut cautions = vec!["A mean score summarises what raters chose to say: who rates, and why, differs between sellers, and the model cannot see that. The posterior mean score is the best guess under one prior fitted to all sellers; read the interval and the number of ratings with it.".to_string()];
    if summary.checks.as_ref().is_some_and(|c| c.verdict == VERDICT_POOR_FIT) {
        cautions.push("The calibration check found a poor fit: one prior does not describe these sellers, and every posterior, rank and flag leans on it. Look for sellers of different kinds (fit per segment with --by) before acting on any result.".to_string());
    }
    if summary.prior_law != "Dirichlet" {
        cautions.push("The fit ended at no overdispersion: every seller was given the pooled shares, so nothing here tells one seller from another.".to_string());
    }
    if summary.rank_order.is_some() {
        cautions.push(RANKING_CAUTION.to_string());
    }
    if let Some(flags) = &summary.flags {
        cautions.push(flag_caution(flags));
    }
    if let Some(segments) = &summary.segments {
        let borrowed = segments.segments.iter().filter(|s| s.fallback.is_some()).count();
        if borrowed > 0 {
            cautions.push(borrowed_caution(borrowed, segments.segments.len()));
        }
    }
    cautions.push(DISCLOSURE_CAUTION.to_string());
    cautions
}

/// The sellers' tables: a seller's size is its ratings, its raw value its raw mean score.
const HEADINGS: TableHeadings = TableHeadings { count: None, size: "ratings", raw: "raw mean score" };

/// The levels: each one's score, prior shape and share, and the share of all ratings it holds.
fn level_table(summary: &LevelSummary, collected: &LevelCollected, out: &mut String) {
    let _ = writeln!(
        out,
        "<table id=\"levels\"><thead><tr><th>level</th><th>score</th><th>prior shape (se)</th><th>prior share (se)</th><th>share of all ratings</th></tr></thead><tbody>"
    );
    for (level, total) in summary.levels.iter().zip(&collected.level_totals) {
        let shape = match (level.prior_shape, level.prior_shape_se) {
            (Some(a), Some(se)) => format!("{} ({})", num(a), num(se)),
            (Some(a), None) => num(a),
            _ => "n/a".to_string(),
        };
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{} ({})</td><td>{}</td></tr>",
            escape(&level.column),
            num(level.score),
            shape,
            num(level.prior_share),
            num(level.prior_share_se),
            if collected.ratings > 0.0 { num(total / collected.ratings) } else { "n/a".to_string() }
        );
    }
    let _ = writeln!(out, "</tbody></table>");
}

/// The segments of `--by`: each one's prior and pull.
fn segment_table(summary: &LevelSummary, out: &mut String) {
    let Some(segments) = &summary.segments else { return };
    let _ = writeln!(out, "<section id=\"segments\"><h2>Segments</h2>");
    if let Some(test) = &summary.segment_test {
        segment_test_line(test, "sellers", out);
    }
    let _ = write!(out, "<table><thead><tr>");
    for column in &segments.columns {
        let _ = write!(out, "<th>{}</th>", escape(column));
    }
    let _ = writeln!(
        out,
        "<th>groups</th><th>prior</th><th>mean score</th><th>strength</th><th>mean pool weight</th></tr></thead><tbody>"
    );
    for segment in &segments.segments {
        let _ = write!(out, "<tr>");
        for column in &segments.columns {
            let value = segment.key.get(column).cloned().flatten().unwrap_or_else(|| "(null)".to_string());
            let _ = write!(out, "<td>{}</td>", escape(&value));
        }
        let prior = match &segment.fallback {
            Some(why) => format!("all sellers' ({why})"),
            None => segment.prior_law.clone(),
        };
        let _ = writeln!(
            out,
            "<td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            segment.groups,
            escape(&prior),
            num(segment.mean_score),
            segment.strength.map_or("infinite".into(), num),
            num(segment.pull.pool_weight_mean)
        );
    }
    let _ = writeln!(out, "</tbody></table></section>");
}

/// The whole star-rating page.
pub fn render_levels(summary: &LevelSummary, collected: &LevelCollected, figures: &[Figure]) -> String {
    let mut out = String::new();
    open_page(&format!("ratepool report: {} groups, {}", collected.groups, summary.model), &mut out);
    let prior = match summary.strength {
        Some(strength) => format!(
            "{}, mean score {} (se {}), strength {} (se {})",
            summary.prior_law,
            num(summary.mean_score),
            num(summary.mean_score_se),
            num(strength),
            summary.strength_se.map_or("n/a".into(), num)
        ),
        None => format!("{}, mean score {}", summary.prior_law, num(summary.mean_score)),
    };
    let _ = writeln!(
        out,
        "<section id=\"overview\"><dl><dt>groups</dt><dd>{}</dd><dt>ratings</dt><dd>{}</dd><dt>rows read</dt><dd>{} ({} rejected)</dd><dt>distinct count vectors</dt><dd>{}</dd><dt>prior</dt><dd>{}</dd><dt>pool weight</dt><dd>mean {}, median {}, 10th to 90th percentile {} to {}</dd><dt>rank correlation, raw and posterior</dt><dd>{}</dd><dt>intervals</dt><dd>{}% credible, of the mean score</dd></dl>",
        collected.groups,
        num(collected.ratings),
        summary.rows_read,
        summary.rows_rejected,
        summary.distinct_vectors,
        escape(&prior),
        num(summary.pull.pool_weight_mean),
        num(summary.pull.pool_weight_median),
        num(summary.pull.pool_weight_p10),
        num(summary.pull.pool_weight_p90),
        summary.pull.rank_correlation.map_or("n/a".into(), num),
        num(100.0 * summary.credible_level)
    );
    level_table(summary, collected, &mut out);
    let _ = writeln!(out, "</section><section id=\"diagnostics\"><h2>Diagnostics</h2><ul>");
    for test in [&summary.pooling_test, &summary.overdispersion_test] {
        let _ = writeln!(
            out,
            "<li>{}: {}, {}.</li>",
            escape(&test.name),
            num(test.statistic),
            escape(&p_value_text(test.p_value))
        );
    }
    if let Some(checks) = &summary.checks {
        let _ = writeln!(
            out,
            "<li>Calibration on {}: {} (chi-square {} on {} df, {}).</li>",
            escape(&checks.data),
            escape(&checks.verdict),
            num(checks.calibration.statistic),
            checks.calibration.degrees_of_freedom,
            escape(&p_value_text(checks.calibration.p_value))
        );
    }
    warning_items(&summary.warnings, &mut out);
    let _ = writeln!(out, "</ul></section>");
    plots_section(figures, &mut out);
    let words = TableWords {
        groups: "sellers",
        moved: "posterior mean score is furthest from their raw mean: mostly sellers with few ratings",
        ends: "interval ends of their mean score",
    };
    listed_tables(
        &collected.listed,
        summary.rank_order.as_deref(),
        summary.flags.is_some(),
        &HEADINGS,
        &words,
        &mut out,
    );
    let _ = writeln!(out, "</section>");
    segment_table(summary, &mut out);
    close_page(
        &level_cautions(summary),
        &format!("The scatter plot shows at most {SAMPLE} sellers, drawn with a fixed seed, so the same inputs give the same page."),
        &mut out,
    );
    out
}
