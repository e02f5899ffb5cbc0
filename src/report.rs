//! The short text of a run's summary shown on the terminal.

use crate::core::model::Model;
use crate::summary::{
    p_value_figure, p_value_text, plain, three_digits, CovariatePrior, FlagReport, FreePriorReport,
    LevelSummary, Summary,
};
use std::fmt::Write;

fn show(value: Option<f64>) -> String {
    value.map_or_else(|| "n/a".to_string(), plain)
}

/// The terminal version of a summary, without its warnings (shown once,
/// on stderr, by the caller; they are in the summary file too).
pub fn render_text(summary: &Summary) -> String {
    let mut out = String::new();
    let prior = &summary.fitted_prior;
    let _ = writeln!(
        out,
        "ratepool {}: {} groups scored ({} rows read, {} rejected)",
        summary.model, summary.groups, summary.rows_read, summary.rows_rejected
    );
    if let Some(standard) = &summary.standardisation {
        let file = standard.reference_file.as_deref().unwrap_or_default();
        let (rate, standard_used) = match standard.standard.as_str() {
            "external" => ("rate", format!("external standard: {file}")),
            "saved" => ("rate", format!("the standard saved with the prior: {file}")),
            _ => ("pooled rate", "internal standard".to_string()),
        };
        let _ = writeln!(
            out,
            "  expected     {} x {rate}, {} strata of {} ({standard_used})",
            standard.population,
            standard.rates.len(),
            standard.strata.join(", ")
        );
    }
    let model = Model::from_name(&summary.model);
    match (prior.covariates(), model) {
        (Some(covariates), Some(model)) => covariate_lines(&mut out, summary, covariates, model),
        _ if prior.free_part().is_some() => free_lines(&mut out, summary),
        _ => {
            let shape = match model {
                Some(model) => prior.terminal_words(model.terms(), &show, &three_digits),
                None => format!("a prior of the unknown model {}", summary.model),
            };
            let _ = writeln!(
                out,
                "  {:<13}{shape}; mean {:.6} (se {}), strength {}",
                if summary.neighbourhood.is_some() { "all areas" } else { "prior" },
                prior.mean(),
                three_digits(prior.mean_se()),
                prior.strength().map_or("infinite".to_string(), plain)
            );
        }
    }
    if let Some(hoods) = &summary.neighbourhood {
        let _ = writeln!(
            out,
            "  neighbours   each area's prior from its neighbourhood ({} pairs of neighbours over {} areas, {}); {} pooled to the local rate (local variance 0), {} without neighbours (the all-areas prior)",
            hoods.pairs, hoods.areas, hoods.file, hoods.zero_variance, hoods.without_neighbours
        );
    }
    let fit = &summary.fit;
    let fitted_here = fit.source == "fit";
    let _ = writeln!(
        out,
        "  {}log marginal likelihood {:.4}, {} iterations, converged {}, boundary {}",
        if fitted_here {
            "fit          ".to_string()
        } else {
            format!("prior fit    (saved in {}, on the data it was fitted to) ", fit.source)
        },
        fit.log_marginal_likelihood,
        fit.iterations,
        fit.converged,
        fit.boundary
    );
    if let Some(restricted) = fit.restricted_log_likelihood {
        let _ = writeln!(
            out,
            "  criterion    restricted likelihood (REML), maximised at {restricted:.4}; the pooling test compares restricted likelihoods"
        );
    }
    let test = &fit.overdispersion_test;
    dispersion_line(&mut out, test);
    if let Some(test) = &fit.pooling_test {
        let _ = writeln!(
            out,
            "  pooling      likelihood ratio against complete pooling {:.3}, {} (50:50 chi-square(0):chi-square(1))",
            test.statistic,
            p_value_text(test.p_value)
        );
    }
    pull_lines(&mut out, &summary.pull);
    let fallbacks = summary.segments.iter().filter(|s| s.fallback.is_some()).count();
    let counts = (summary.segments.len(), fallbacks);
    segment_lines(&mut out, &summary.segment_columns, counts, summary.segment_test.as_ref());
    if let Some(checks) = &summary.checks {
        let c = &checks.calibration;
        let _ = writeln!(
            out,
            "  calibration  {}: {}; raw-rate variance observed/expected {:.3}: {}",
            checks.data,
            c.test_words(),
            checks.raw_rate_variance.ratio.unwrap_or(f64::NAN),
            checks.verdict
        );
    }
    if let Some(flags) = &summary.flags {
        flag_line(&mut out, flags);
    }
    // The warnings are not repeated here: the caller shows each once, on stderr.
    out
}

/// The terminal version of a star-rating run's summary (without its warnings).
pub fn render_level_text(summary: &LevelSummary) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "ratepool {}: {} groups scored ({} rows read, {} rejected; {} distinct count vectors)",
        summary.model, summary.groups, summary.rows_read, summary.rows_rejected, summary.distinct_vectors
    );
    let shapes: Vec<String> = summary
        .levels
        .iter()
        .map(|level| match (level.prior_shape, level.prior_shape_se) {
            (Some(a), Some(se)) => format!("{} {} ({})", level.column, three_digits(a), three_digits(se)),
            _ => format!("{} share {}", level.column, three_digits(level.prior_share)),
        })
        .collect();
    let law = if summary.strength.is_some() { "Dirichlet, shapes (se)" } else { "pooled shares" };
    let _ = writeln!(out, "  prior        {law}: {}", shapes.join(", "));
    let scores: Vec<String> = summary.levels.iter().map(|l| plain_score(l.score)).collect();
    let _ = writeln!(
        out,
        "  mean score   {:.4} (se {}) on scores {}; strength {}{}",
        summary.mean_score,
        three_digits(summary.mean_score_se),
        scores.join(", "),
        summary.strength.map_or("infinite".to_string(), plain),
        summary.strength_se.map_or(String::new(), |se| format!(" (se {})", three_digits(se)))
    );
    let _ = writeln!(
        out,
        "  {}log marginal likelihood {:.4}, {} Newton steps",
        match &summary.prior_file {
            Some(file) => format!("prior fit    (saved in {file}, on the data it was fitted to) "),
            None => "fit          ".to_string(),
        },
        summary.log_marginal_likelihood,
        summary.iterations
    );
    let test = &summary.overdispersion_test;
    dispersion_line(&mut out, test);
    let test = &summary.pooling_test;
    let _ = writeln!(
        out,
        "  pooling      {} {:.3}, {} (50:50 chi-square(0):chi-square(1))",
        test.name,
        test.statistic,
        p_value_text(test.p_value)
    );
    pull_lines(&mut out, &summary.pull);
    if let Some(segments) = &summary.segments {
        let fallbacks = segments.segments.iter().filter(|s| s.fallback.is_some()).count();
        let counts = (segments.segments.len(), fallbacks);
        segment_lines(&mut out, &segments.columns, counts, summary.segment_test.as_ref());
    }
    if let Some(checks) = &summary.checks {
        let _ = writeln!(
            out,
            "  calibration  {}: each mean score placed among {} replicates from its prior predictive, {}: {}",
            checks.data,
            checks.replicates,
            checks.calibration.test_words(),
            checks.verdict
        );
    }
    if let Some(flags) = &summary.flags {
        flag_line(&mut out, flags);
    }
    out
}

/// The segments' line (with any segment) and the segment test's (when made):
/// `counts` holds the segments and how many took the all-groups prior.
fn segment_lines(
    out: &mut String,
    columns: &[String],
    (segments, fallbacks): (usize, usize),
    test: Option<&crate::summary::SegmentTest>,
) {
    if segments > 0 {
        let _ = writeln!(
            out,
            "  segments     {segments} by {} ({} with a prior of their own, {fallbacks} on the all-groups prior)",
            columns.join(", "),
            segments - fallbacks,
        );
    }
    if let Some(test) = test {
        let _ = writeln!(
            out,
            "  segment test one prior for all against one per segment: chi-square {:.3} on {} df, {}",
            test.statistic,
            test.degrees_of_freedom,
            p_value_text(test.p_value)
        );
    }
}

/// The pool weights' and the shifts' lines.
fn pull_lines(out: &mut String, pull: &crate::summary::PullReport) {
    let _ = writeln!(
        out,
        "  pool weight  mean {:.3}, median {:.3}, p10 {:.3}, p90 {:.3}",
        pull.pool_weight_mean, pull.pool_weight_median, pull.pool_weight_p10, pull.pool_weight_p90
    );
    let _ = writeln!(
        out,
        "  shift        mean |posterior - raw| {}, largest {} (group {}), rank correlation {}",
        show(pull.mean_abs_shift),
        show(pull.max_abs_shift),
        pull.max_shift_group.as_deref().unwrap_or("n/a"),
        show(pull.rank_correlation)
    );
}

/// The overdispersion test's line.
fn dispersion_line(out: &mut String, test: &crate::summary::TestReport) {
    let _ = writeln!(
        out,
        "  dispersion   {} Z = {:.3}, one-sided {}",
        test.name,
        test.statistic,
        p_value_text(test.p_value)
    );
}

/// The flags' line.
fn flag_line(out: &mut String, flags: &FlagReport) {
    let _ = writeln!(
        out,
        "  flags        {} groups flagged {} {} at Q = {} (expected false flags {:.3})",
        flags.groups_flagged, flags.event, flags.threshold, flags.fdr_level, flags.expected_false_flags
    );
}

/// A level's score as given: `4`, `0.25`.
fn plain_score(score: f64) -> String {
    if score.fract() == 0.0 && score.abs() < 1e15 {
        format!("{}", score as i64)
    } else {
        format!("{score}")
    }
}

/// The most support points of a free prior the terminal lists.
const SUPPORT_SHOWN: usize = 12;

/// A free prior: its grid, its support and the comparison with the
/// parametric prior on the same data.
fn free_lines(out: &mut String, summary: &Summary) {
    let prior = &summary.fitted_prior;
    let Some(free) = prior.free_part() else { return };
    let _ = writeln!(
        out,
        "  prior        free: masses on {} grid points ({} spacing), {} holding at least {} of the mass; mean {:.6}, sd {}",
        free.grid.len(),
        free.spacing,
        free.support.len(),
        FreePriorReport::SHOWN_MASS,
        prior.mean(),
        three_digits(prior.get("sd").unwrap_or(f64::NAN))
    );
    // At most the twelve points with the most mass, in rate order; the rest summed.
    let mut heaviest: Vec<&[f64; 2]> = free.support.iter().collect();
    heaviest.sort_by(|a, b| b[1].total_cmp(&a[1]));
    let rest: f64 = heaviest.iter().skip(SUPPORT_SHOWN).map(|p| p[1]).sum();
    let left = heaviest.len().saturating_sub(SUPPORT_SHOWN);
    heaviest.truncate(SUPPORT_SHOWN);
    heaviest.sort_by(|a, b| a[0].total_cmp(&b[0]));
    let mut shown: Vec<String> =
        heaviest.iter().map(|[rate, mass]| format!("{} ({:.3})", plain(*rate), mass)).collect();
    if left > 0 {
        let points = if left == 1 { "point" } else { "points" };
        shown.push(format!("and {left} more {points} holding {rest:.3}"));
    }
    let _ = writeln!(out, "  support      {}", shown.join(", "));
    let Some(comparison) = &summary.prior_comparison else { return };
    match (&comparison.parametric_prior, comparison.log_likelihood_gain, &comparison.parametric_checks) {
        (Some(parametric), Some(gain), Some(checks)) => {
            let model = Model::from_name(&summary.model);
            let shape = match model {
                Some(model) => parametric.terminal_words(model.terms(), &show, &three_digits),
                None => "the parametric prior".to_string(),
            };
            let _ = writeln!(
                out,
                "  parametric   {shape}: log marginal likelihood {:.4} ({} lower); calibration {}: {}",
                comparison.parametric_log_marginal_likelihood.unwrap_or(f64::NAN),
                plain(gain),
                p_value_text(checks.calibration.p_value),
                checks.verdict
            );
            let flags = comparison
                .flags_changed
                .map_or(String::new(), |changed| format!("{changed} groups change their flag, "));
            let _ = writeln!(
                out,
                "  shapes       {flags}{} groups move more than 10 ranks by posterior mean between the two priors",
                comparison.moved_over_ten_ranks.unwrap_or(0)
            );
        }
        _ => {
            let _ = writeln!(
                out,
                "  parametric   not fitted: {}",
                comparison.parametric_failure.as_deref().unwrap_or("no reason recorded")
            );
        }
    }
}

/// A covariate prior: its law and common parameter, the coefficient table
/// and the test against no covariates.
fn covariate_lines(out: &mut String, summary: &Summary, covariates: &CovariatePrior, model: Model) {
    let terms = model.terms();
    let key = terms.covariate_terms.common_key;
    let prior = &summary.fitted_prior;
    let common = match (prior.get(key), prior.get(&format!("{key}_se"))) {
        (Some(value), Some(se)) => format!("{key} {} (se {})", plain(value), three_digits(se)),
        _ => format!("{key} at its boundary (no overdispersion beyond the covariates)"),
    };
    let _ = writeln!(
        out,
        "  prior        {} centred on a regression on the {} scale; {common}; mean centre {:.6}",
        terms.prior_words.law,
        covariates.link,
        prior.mean()
    );
    let width = covariates.coefficients.iter().map(|c| c.name.chars().count()).max().unwrap_or(0).max(11);
    let _ = writeln!(out, "  coefficient  {:<width$}  {:>11}  {:>9}  {:>8}  p", "", "estimate", "se", "z");
    for c in &covariates.coefficients {
        let _ = writeln!(
            out,
            "               {:<width$}  {:>11}  {:>9}  {:>8.2}  {}",
            c.name,
            plain(c.estimate),
            three_digits(c.se),
            c.z,
            p_value_figure(c.p)
        );
    }
    if let Some(test) = &covariates.likelihood_ratio_test {
        let _ = writeln!(
            out,
            "  covariates   likelihood ratio against no covariates: chi-square {:.3} on {} df, {}",
            test.statistic,
            test.degrees_of_freedom,
            p_value_text(test.p_value)
        );
    }
}
