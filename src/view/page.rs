//! The HTML page: the run in figures, the diagnostics in words, the tables
//! and one section per segment. Escaped text, inline SVG, inline style.

use super::collect::{Collected, GroupRow, Listed, LISTED, SAMPLE, WELL_MEASURED};
use super::plots::{self, PriorShown};
use super::Figure;
use crate::core::model::{Model, RateLaw};
use crate::error::Result;
use crate::summary::{
    p_value_figure, p_value_text, ChecksReport, FittedPrior, FlagReport, SegmentTest, Summary,
    MIN_GROUPS_TO_JUDGE,
};
use std::fmt::Write;

/// Segments drawn with a plot of their own; the rest are in the table only.
const SEGMENT_PLOTS: usize = 12;

/// Text made safe for HTML.
pub(super) fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// A number for a reader: four significant digits, or a plain integer.
pub(super) fn num(v: f64) -> String {
    if !v.is_finite() {
        return "n/a".to_string();
    }
    if v == v.trunc() && v.abs() < 1e15 {
        return format!("{v:.0}");
    }
    let magnitude = v.abs();
    if !(1e-3..1e6).contains(&magnitude) {
        format!("{v:.3e}")
    } else {
        let decimals = (3 - magnitude.log10().floor() as i32).clamp(0, 6) as usize;
        format!("{v:.decimals$}")
    }
}

/// The plots of the whole run, and of each segment drawn.
pub fn figures(
    summary: &Summary,
    model: Model,
    collected: &Collected,
    prior: Option<RateLaw>,
) -> Result<(Vec<Figure>, Vec<Option<Figure>>)> {
    let terms = model.terms();
    let prior_mean = summary.fitted_prior.mean();
    let sampled = |n: usize, total: u64| {
        if (n as u64) < total {
            format!("a seeded sample of {n} of the {total} groups")
        } else {
            format!("all {total} groups")
        }
    };
    let mut figures = vec![Figure {
        name: "shrinkage".into(),
        title: "Shrinkage".into(),
        caption: format!(
            "Raw value against posterior mean for {}; marker size grows with the group's data. Groups on the diagonal kept their own value; groups pulled to the horizontal line ({}, {}) took the pool's. Small groups move, large ones stay.",
            sampled(collected.sample.len(), collected.groups),
            if summary.own_centres().is_some() {
                "the mean of the prior fitted to all groups; each group is pulled toward its own centre, `prior_mean`"
            } else {
                "the prior mean"
            },
            num(prior_mean)
        ),
        svg: plots::shrinkage(&collected.sample, prior_mean, terms)?,
    }];
    let flagged: Vec<&GroupRow> = collected.listed.flagged.rows().collect();
    figures.push(Figure {
        name: "funnel".into(),
        title: "Funnel plot".into(),
        caption: format!(
            "Raw value against {} for {}, with the pooled value {} and its 95% and 99.8% control limits (Spiegelhalter, Statistics in Medicine 2005). {}Points outside the limits vary more than sampling noise alone explains; the funnel ignores the prior, the posterior does not.",
            terms.plots.funnel_noun,
            sampled(collected.sample.len(), collected.groups),
            num(collected.pooled),
            if collected.listed.flagged_count > 0 { "Flagged groups are red. " } else { "" }
        ),
        svg: plots::funnel(
            &collected.sample,
            &flagged,
            (terms, collected.pooled),
            collected.funnel_range,
        )?,
    });
    if let Some(source) = summary.own_centres() {
        figures.push(Figure {
            name: "centres".into(),
            title: "Raw values against their prior centres".into(),
            caption: format!(
                "Raw value against each group's prior centre (`prior_mean`, from {source}) for {}; marker size grows with the group's data. Groups on the diagonal are what {source} predict; the spread about it, wide for small groups, is what the pooling works on.",
                sampled(collected.sample.len(), collected.groups)
            ),
            svg: plots::raw_against_centre(&collected.sample, terms)?,
        });
    } else {
        let parametric = summary.prior_comparison.as_ref().and_then(|c| c.parametric_prior.as_ref());
        let shown = match (summary.fitted_prior.free_part(), prior) {
            (Some(free), _) => PriorShown::Free {
                support: &free.support,
                parametric: parametric.and_then(|p| match p.natural(terms) {
                    [Some(a), Some(b)] => Some((terms.law_of)([a, b])),
                    _ => None,
                }),
            },
            (None, Some(law)) => PriorShown::Law(law),
            (None, None) => PriorShown::Pooled(prior_mean),
        };
        let under = match &shown {
            PriorShown::Law(_) => "under the fitted prior's density".to_string(),
            PriorShown::Pooled(_) => "under a line at the pooled value (complete pooling)".to_string(),
            PriorShown::Free { parametric, .. } => format!(
                "under the free prior's masses (red bars: each point holding at least {} of the mass, as its mass over one histogram bin's width){}",
                crate::summary::FreePriorReport::SHOWN_MASS,
                if parametric.is_some() {
                    " and the parametric prior fitted to the same data (grey line): where the bars gather in humps the line does not follow, the parametric prior pulls groups toward the wrong place"
                } else {
                    ""
                }
            ),
        };
        figures.push(Figure {
        name: "prior".into(),
        title: "The prior over the raw values".into(),
        caption: format!(
            "Histogram (as a density) of the raw values of {} well-measured groups (pool weight at most {WELL_MEASURED}, so their own data carry at least 80% of their posterior mean){}, {under}.",
            collected.well_measured_count,
            if (collected.well_measured.len() as u64) < collected.well_measured_count {
                format!(", a seeded sample of {}", collected.well_measured.len())
            } else {
                String::new()
            },
        ),
        svg: plots::prior_over_raw(&collected.well_measured, &shown, terms)?,
    });
    }
    if let Some(checks) = &summary.checks {
        figures.push(Figure {
            name: "calibration".into(),
            title: "Calibration".into(),
            caption: format!(
                "Where each of {} groups falls in its prior predictive distribution (randomised PIT, seed {}), in tenths. When the model holds the bars are level at the line; chi-square {} on 9 df, {}.",
                checks.calibration.groups,
                checks.calibration.seed,
                num(checks.calibration.statistic),
                p_value_text(checks.calibration.p_value)
            ),
            svg: plots::calibration(&checks.calibration.bins)?,
        });
    }
    figures.push(Figure {
        name: "pool-weights".into(),
        title: "Pool weights".into(),
        caption: format!(
            "How much of each group's posterior mean is the pool's, over all {} groups: median {}.",
            collected.groups,
            num(summary.pull.pool_weight_median)
        ),
        svg: plots::pool_weights(&collected.pool_weights)?,
    });
    let mut segment_figures = Vec::new();
    for (i, sample) in collected.segment_samples.iter().enumerate() {
        if i >= SEGMENT_PLOTS {
            segment_figures.push(None);
            continue;
        }
        let segment = &summary.segments[i];
        segment_figures.push(Some(Figure {
            name: format!("segment-{}-shrinkage", i + 1),
            title: format!("Shrinkage in {}", segment_name(summary, i)),
            caption: format!(
                "Raw value against posterior mean for {} of the segment, toward its prior mean {}.",
                sampled(sample.len(), segment.groups),
                num(segment.fitted_prior.mean())
            ),
            svg: plots::shrinkage(sample, segment.fitted_prior.mean(), terms)?,
        }));
    }
    Ok((figures, segment_figures))
}

/// A segment's name: its columns and values.
fn segment_name(summary: &Summary, i: usize) -> String {
    let key = &summary.segments[i].key;
    summary
        .segment_columns
        .iter()
        .map(|c| format!("{c} = {}", key.get(c).cloned().flatten().unwrap_or_else(|| "(null)".into())))
        .collect::<Vec<_>>()
        .join(", ")
}

/// A prior in words.
fn prior_text(prior: &FittedPrior, model: Model) -> String {
    if let Some(free) = prior.free_part() {
        return format!(
            "free: masses on {} grid points ({} spacing), {} of them holding at least {} of the mass; mean {}, standard deviation {}",
            free.grid.len(),
            free.spacing,
            free.support.len(),
            crate::summary::FreePriorReport::SHOWN_MASS,
            num(prior.mean()),
            num(prior.get("sd").unwrap_or(f64::NAN))
        );
    }
    if let Some(covariates) = prior.covariates() {
        let terms = model.terms();
        let key = terms.covariate_terms.common_key;
        let coefficients: Vec<String> = covariates
            .coefficients
            .iter()
            .map(|c| format!("{} {} (standard error {})", c.name, num(c.estimate), num(c.se)))
            .collect();
        let common = prior
            .get(key)
            .map_or("infinite strength (no overdispersion beyond the covariates)".to_string(), |v| {
                format!("{key} {}", num(v))
            });
        return format!(
            "{} centred on a regression on the {} scale: {}; {common}; mean centre {}",
            terms.prior_words.law,
            covariates.link,
            coefficients.join(", "),
            num(prior.mean())
        );
    }
    let shape = prior.page_words(model.terms(), &num).unwrap_or_else(|| "complete pooling".into());
    let strength = prior.strength().map_or("infinite (no overdispersion)".to_string(), num);
    format!(
        "{shape}; mean {} (standard error {}), strength {strength}",
        num(prior.mean()),
        num(prior.mean_se())
    )
}

/// The checks in plain words.
fn checks_text(checks: &ChecksReport) -> String {
    let calibration = &checks.calibration;
    let variance = checks.raw_rate_variance.ratio.map_or(String::new(), |r| {
        format!(" The raw values vary {} times as much as the prior predicts.", num(r))
    });
    if checks.too_few_to_judge() {
        format!(
            "Calibration: {} groups are too few to judge whether one prior describes them (the check needs at least {MIN_GROUPS_TO_JUDGE}, about five for each tenth).",
            calibration.groups
        )
    } else if !checks.poor_fit() {
        format!(
            "Calibration: the groups sit evenly in their prior predictive distributions (chi-square {} on 9 df, {}): one prior describes them.{variance}",
            num(calibration.statistic),
            p_value_text(calibration.p_value)
        )
    } else {
        format!(
            "Calibration: <strong>poor fit</strong>. The groups sit unevenly in their prior predictive distributions (chi-square {} on 9 df, {}).{variance} One prior of the model's law cannot describe groups of different kinds (two humps, say): fit per segment with --by where a column names the kinds, or with a prior of any shape (--prior-shape free) where none does, before trusting the intervals and flags.",
            num(calibration.statistic),
            p_value_text(calibration.p_value)
        )
    }
}

/// The diagnostics of the fit in words.
fn diagnostics(summary: &Summary, out: &mut String) {
    let fit = &summary.fit;
    let fitted_here = fit.source == "fit";
    let _ = writeln!(out, "<section id=\"diagnostics\"><h2>Diagnostics</h2><ul>");
    let convergence = if fitted_here {
        format!(
            "The fit {} in {} iterations (log marginal likelihood {}{}).",
            if fit.converged { "converged" } else { "did <strong>not</strong> converge" },
            fit.iterations,
            num(fit.log_marginal_likelihood),
            fit.restricted_log_likelihood
                .map_or(String::new(), |r| format!("; restricted likelihood {} maximised", num(r)))
        )
    } else {
        format!("The prior was not fitted here: it was read from {}.", escape(&fit.source))
    };
    let _ = writeln!(out, "<li>{convergence}</li>");
    let boundary = if fit.boundary == "none" {
        "The prior is a proper one: the groups differ, and each is pulled toward the pool by how little data it has.".to_string()
    } else {
        "The fit ended at the boundary of no overdispersion: the groups differ no more than sampling noise allows, so every group is given the pooled value (complete pooling) and the intervals are those of the pooled value.".to_string()
    };
    let _ = writeln!(out, "<li>{boundary}</li>");
    let test = &fit.overdispersion_test;
    let _ = writeln!(
        out,
        "<li>Overdispersion ({}): Z = {}, one-sided {}. {}</li>",
        escape(&test.name),
        num(test.statistic),
        escape(&p_value_text(test.p_value)),
        if test.p_value < 0.05 {
            "The groups vary more than sampling noise alone allows."
        } else {
            "The data show little variation beyond sampling noise."
        }
    );
    if let Some(pooling) = &fit.pooling_test {
        let _ = writeln!(
            out,
            "<li>Against complete pooling: likelihood ratio {}, {} (50:50 mixture of chi-square(0) and chi-square(1)).</li>",
            num(pooling.statistic),
            escape(&p_value_text(pooling.p_value))
        );
    }
    if let Some(checks) = &summary.checks {
        let _ = writeln!(out, "<li>{} (on {})</li>", checks_text(checks), escape(&checks.data));
    }
    let _ = writeln!(
        out,
        "<li>Intervals: {}% equal-tailed, {}.</li>",
        num(100.0 * summary.level),
        if summary.intervals == "corrected" {
            "corrected for the estimation of the prior"
        } else {
            "plug-in (the fitted prior taken as known; they run short when groups are few)"
        }
    );
    if let Some(flags) = &summary.flags {
        let _ = writeln!(
            out,
            "<li>Flags: {} groups flagged as {} {} at a posterior false-discovery rate of {}; about {} of them are expected to be false.</li>",
            flags.groups_flagged,
            escape(&flags.event),
            num(flags.threshold),
            num(flags.fdr_level),
            num(flags.expected_false_flags)
        );
    }
    warning_items(&summary.warnings, out);
    let _ = writeln!(out, "</ul></section>");
}

/// The headings of a group table's count, size and raw columns (no count
/// column where the count is the size, as for star ratings).
pub(super) struct TableHeadings<'a> {
    pub(super) count: Option<&'a str>,
    pub(super) size: &'a str,
    pub(super) raw: &'a str,
}

impl TableHeadings<'static> {
    fn of(model: Model) -> Self {
        TableHeadings {
            count: Some(model.terms().count_role),
            size: model.terms().plots.size_noun,
            raw: "raw",
        }
    }
}

/// How a page's group tables name the groups.
pub(super) struct TableWords<'a> {
    /// The groups, plural.
    pub(super) groups: &'a str,
    /// What "moved most" means, after "whose".
    pub(super) moved: &'a str,
    /// The interval ends ranked.
    pub(super) ends: &'a str,
}

/// The "Groups" section: the tables of the groups that moved most, the
/// top and bottom of the conservative ranking, and the flagged.
pub(super) fn listed_tables(
    listed: &Listed,
    rank_order: Option<&str>,
    flagged: bool,
    headings: &TableHeadings,
    words: &TableWords,
    out: &mut String,
) {
    let TableWords { groups, moved, ends } = words;
    let _ = writeln!(out, "</section><section id=\"tables\"><h2>Groups</h2>");
    fn rows(best: &super::collect::Best) -> Vec<&GroupRow> {
        best.rows().collect()
    }
    group_table(
        "Moved most",
        &format!("The {LISTED} {groups} whose {moved}."),
        &rows(&listed.moved),
        headings,
        out,
    );
    let (bound, best) =
        if rank_order == Some("lowest-first") { ("upper", "lowest") } else { ("lower", "highest") };
    group_table(
        "Top of the conservative ranking",
        &format!("The {LISTED} {groups} with the {best} {bound} {ends}: reliably among the {best}."),
        &rows(&listed.top),
        headings,
        out,
    );
    group_table(
        "Bottom of the conservative ranking",
        &format!("The {LISTED} {groups} last by their {bound} interval ends."),
        &rows(&listed.bottom),
        headings,
        out,
    );
    if flagged {
        let shown = rows(&listed.flagged);
        group_table(
            "Flagged",
            &format!(
                "{} {groups} flagged; the {} of highest posterior probability of the event are listed.",
                listed.flagged_count,
                shown.len()
            ),
            &shown,
            headings,
            out,
        );
    }
}

/// A table of groups.
fn group_table(title: &str, note: &str, rows: &[&GroupRow], headings: &TableHeadings, out: &mut String) {
    let _ = writeln!(out, "<h3>{}</h3><p>{}</p>", escape(title), escape(note));
    if rows.is_empty() {
        let _ = writeln!(out, "<p>None.</p>");
        return;
    }
    let with_probability = rows.iter().any(|r| r.event_probability.is_some());
    let _ = write!(out, "<table><thead><tr><th>group</th>");
    if let Some(count) = headings.count {
        let _ = write!(out, "<th>{count}</th>");
    }
    let _ = write!(
        out,
        "<th>{}</th><th>{}</th><th>posterior mean</th><th>interval</th><th>pool weight</th>",
        headings.size, headings.raw
    );
    if with_probability {
        let _ = write!(out, "<th>event probability</th>");
    }
    let _ = writeln!(out, "</tr></thead><tbody>");
    for r in rows {
        let _ = write!(out, "<tr><td>{}</td>", escape(&r.id));
        if headings.count.is_some() {
            let _ = write!(out, "<td>{}</td>", num(r.count));
        }
        let _ = write!(
            out,
            "<td>{}</td><td>{}</td><td>{}</td><td>{} to {}</td><td>{}</td>",
            num(r.size),
            r.raw.map_or("n/a".into(), num),
            num(r.mean),
            num(r.lower),
            num(r.upper),
            num(r.pool_weight)
        );
        if with_probability {
            let _ = write!(out, "<td>{}</td>", r.event_probability.map_or("n/a".into(), num));
        }
        let _ = writeln!(out, "</tr>");
    }
    let _ = writeln!(out, "</tbody></table>");
}

fn figure_html(figure: &Figure, out: &mut String) {
    let _ = writeln!(
        out,
        "<figure class=\"plot{4}\" id=\"plot-{0}\" data-plot=\"{0}\"><h3>{1}</h3>{2}<figcaption>{3}</figcaption></figure>",
        figure.name,
        escape(&figure.title),
        figure.svg,
        escape(&figure.caption),
        // Maps take the page's width.
        if figure.name.starts_with("map") { " wide" } else { "" }
    );
}

/// The cautions that apply to this run, in words that assume no trade:
/// each only where the run did what it warns about (ranked, flagged, fitted
/// few groups, fitted poorly, ended at the boundary, borrowed a prior).
pub fn cautions(summary: &Summary) -> Vec<String> {
    let mut cautions = Vec::new();
    if let Some(checks) = &summary.checks {
        if checks.poor_fit() {
            cautions.push("The calibration check found a poor fit: one prior does not describe these groups, and every posterior, rank and flag leans on it. Look for groups of different kinds (fit per segment with --by, or with --prior-shape free) before acting on any result.".to_string());
        } else if checks.too_few_to_judge() {
            cautions.push(format!("With {} groups the calibration check cannot judge whether one prior describes them: the results lean on a prior that nothing here has checked.", checks.calibration.groups));
        }
    }
    if summary.fit.boundary != "none" {
        cautions.push("The fit ended at no overdispersion: every group was given the pooled value, so nothing here tells one group from another.".to_string());
    }
    match (summary.intervals.as_str(), summary.groups) {
        ("plug-in", groups) if groups < 200 => cautions.push(format!("Plug-in intervals treat the fitted prior as known and run short with {groups} groups (87.6% to 93.3% of 95% intervals held the truth at 50 groups in the README's coverage studies, by model); --intervals corrected does better.")),
        ("corrected", groups) if groups < 50 => cautions.push(format!("With {groups} groups even corrected intervals run short (86.8% to 94.1% of 95% intervals held the truth at 20 groups in the README's coverage studies, by model).")),
        _ => {}
    }
    if summary.rank_order.is_some() {
        cautions.push(RANKING_CAUTION.to_string());
    }
    if let Some(flags) = &summary.flags {
        cautions.push(flag_caution(flags));
    }
    if let Some(covariates) = summary.fitted_prior.covariates() {
        let columns: Vec<&str> = covariates.covariates.iter().map(|c| c.column.as_str()).collect();
        cautions.push(format!("Each group is pulled toward what its covariates ({}) predict, so its posterior, rank and flags say how it does against groups like it, not against all groups. Which characteristics to adjust for is a choice of policy: adjusting can hide a difference that matters, and some characteristics may not be used at all where you work. A coefficient describes these groups, not the effect of changing a covariate.", columns.join(", ")));
    }
    if let Some(hoods) = &summary.neighbourhood {
        cautions.push(format!("Each area is pulled toward the rate of its neighbourhood (itself and the {} pairs of neighbours in {}), not toward the whole map's: this helps where neighbouring areas share their risk and misleads where they do not. It spreads a high rate to the areas around it, so an area can be flagged for its neighbours' cases rather than its own (compare `smr` with `prior_mean`), and it smooths away a real difference at a border. A high area among high neighbours is not by itself a disease cluster: follow local public-health practice on investigating one.", hoods.pairs, hoods.file));
    }
    let borrowed = summary.segments.iter().filter(|s| s.fallback.is_some()).count();
    if borrowed > 0 {
        cautions.push(borrowed_caution(borrowed, summary.segments.len()));
    }
    cautions.push(DISCLOSURE_CAUTION.to_string());
    cautions
}

/// The caution of a run that ranked.
pub(super) const RANKING_CAUTION: &str = "Ranks order groups by their estimated rate, not by how sure the estimate is: where intervals overlap, a rank decides little. A ranking can affect the people, businesses or places ranked; read the interval and the pool weight before acting on any one rank, and follow the rules that govern such decisions where you work.";

/// The caution every report ends with.
pub(super) const DISCLOSURE_CAUTION: &str = "Results about small groups may identify the people behind them: follow local rules on suppression and disclosure before publishing them.";

/// The caution of a run that flagged.
pub(super) fn flag_caution(flags: &FlagReport) -> String {
    format!("A flag is a statement about a set: of the {} groups flagged at a false-discovery rate of {}, about {} are expected to be wrong. A flag is not proof of a problem, a diagnosis or a cluster: look at a group's data, and follow local rules and licensed practice, before acting on it; do not change the rate after seeing the result.", flags.groups_flagged, flags.fdr_level, num(flags.expected_false_flags))
}

/// The caution of segments that borrowed the all-groups prior.
pub(super) fn borrowed_caution(borrowed: usize, segments: usize) -> String {
    format!("{borrowed} of {segments} segments had too few groups or no fit of their own and borrow the all-groups prior: their groups are pulled toward all groups, not toward their own kind.")
}

const STYLE: &str = "body{font-family:sans-serif;max-width:1100px;margin:2em auto;padding:0 1em;color:#222;line-height:1.45}\
h1{font-size:1.6em}h2{margin-top:2em;border-bottom:1px solid #ccc}\
figure.plot{display:inline-block;vertical-align:top;width:calc(50% - 1em);margin:0 1em 1.5em 0}\
figure.plot svg{width:100%;height:auto}figure.plot.wide{width:calc(100% - 1em)}@media (max-width:900px){figure.plot{width:100%}}\
figure.plot h3{margin:.2em 0;font-size:1.05em}figcaption{font-size:.9em;color:#444}\
table{border-collapse:collapse;font-size:.9em;margin-bottom:1em}td,th{border:1px solid #ddd;padding:.25em .5em;text-align:right}\
td:first-child,th:first-child{text-align:left}.warning{color:#a33}dl{display:grid;grid-template-columns:max-content auto;gap:.2em 1em}";

/// The whole page.
pub fn render(
    summary: &Summary,
    model: Model,
    collected: &Collected,
    figures: &[Figure],
    segment_figures: &[Option<Figure>],
) -> String {
    let mut out = String::new();
    open_page(&format!("ratepool report: {} groups, {}", collected.groups, summary.model), &mut out);
    let _ = writeln!(
        out,
        "<section id=\"overview\"><dl><dt>groups</dt><dd>{}</dd><dt>rows read</dt><dd>{} ({} rejected)</dd><dt>prior</dt><dd>{}</dd><dt>pool weight</dt><dd>mean {}, median {}, 10th to 90th percentile {} to {}</dd><dt>rank correlation, raw and posterior</dt><dd>{}</dd></dl></section>",
        collected.groups,
        summary.rows_read,
        summary.rows_rejected,
        escape(&match &summary.neighbourhood {
            Some(hoods) => format!(
                "each area's own, fitted by moments to its neighbourhood ({} areas, {} pairs of neighbours; {} pooled to their neighbourhood's rate); for the {} areas without neighbours, the prior fitted to all areas: {}",
                hoods.areas,
                hoods.pairs,
                hoods.zero_variance,
                hoods.without_neighbours,
                prior_text(&summary.fitted_prior, model)
            ),
            None => prior_text(&summary.fitted_prior, model),
        }),
        num(summary.pull.pool_weight_mean),
        num(summary.pull.pool_weight_median),
        num(summary.pull.pool_weight_p10),
        num(summary.pull.pool_weight_p90),
        summary.pull.rank_correlation.map_or("n/a".into(), num)
    );
    diagnostics(summary, &mut out);
    plots_section(figures, &mut out);
    let words = TableWords {
        groups: "groups",
        moved: "posterior mean is furthest from their raw value: mostly groups with little data",
        ends: "interval ends",
    };
    listed_tables(
        &collected.listed,
        summary.rank_order.as_deref(),
        summary.flags.is_some(),
        &TableHeadings::of(model),
        &words,
        &mut out,
    );
    let _ = writeln!(out, "</section>");
    if !summary.segments.is_empty() {
        segments(summary, model, segment_figures, &mut out);
    }
    close_page(
        &cautions(summary),
        &format!("Scatter plots show at most {SAMPLE} groups, drawn with a fixed seed, so the same inputs give the same page."),
        &mut out,
    );
    out
}

/// The page's head and heading, `title` in both.
pub(super) fn open_page(title: &str, out: &mut String) {
    let title = escape(title);
    let _ = writeln!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{title}</title><style>{STYLE}</style></head><body>\n<h1>{title}</h1>"
    );
}

/// The warnings, as items of the diagnostics' list.
pub(super) fn warning_items(warnings: &[String], out: &mut String) {
    for warning in warnings {
        let _ = writeln!(out, "<li class=\"warning\">Warning: {}</li>", escape(warning));
    }
}

/// The plots section's heading and figures (the tables' section closes it).
pub(super) fn plots_section(figures: &[Figure], out: &mut String) {
    let _ = writeln!(out, "<section id=\"plots\"><h2>Plots</h2>");
    for figure in figures {
        figure_html(figure, out);
    }
}

/// The one-prior-against-one-per-segment test, of `groups` (plural).
pub(super) fn segment_test_line(test: &SegmentTest, groups: &str, out: &mut String) {
    let _ = writeln!(
        out,
        "<p>One prior for all {groups} against one per segment: likelihood ratio {} on {} df, {}.</p>",
        num(test.statistic),
        test.degrees_of_freedom,
        escape(&p_value_text(test.p_value))
    );
}

/// The cautions section, `note` after the list, and the page's end.
pub(super) fn close_page(cautions: &[String], note: &str, out: &mut String) {
    let _ = writeln!(out, "<section id=\"cautions\"><h2>Cautions</h2><ul>");
    for caution in cautions {
        let _ = writeln!(out, "<li>{}</li>", escape(caution));
    }
    let _ = writeln!(out, "</ul><p>{}</p></section></body></html>", escape(note));
}

/// The segments: a table of all, then a section each for the first few.
fn segments(summary: &Summary, model: Model, segment_figures: &[Option<Figure>], out: &mut String) {
    let _ = writeln!(out, "<section id=\"segments\"><h2>Segments</h2>");
    if let Some(test) = &summary.segment_test {
        segment_test_line(test, "groups", out);
    }
    let _ = writeln!(
        out,
        "<table><thead><tr><th>segment</th><th>groups</th><th>prior mean</th><th>strength</th><th>calibration p</th><th>verdict</th><th>prior</th></tr></thead><tbody>"
    );
    for (i, segment) in summary.segments.iter().enumerate() {
        let checks = segment.checks.as_ref();
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&segment_name(summary, i)),
            segment.groups,
            num(segment.fitted_prior.mean()),
            segment.fitted_prior.strength().map_or("infinite".into(), num),
            checks.map_or("n/a".into(), |c| escape(&p_value_figure(c.calibration.p_value))),
            checks.map_or("n/a", |c| c.verdict.as_str()),
            segment
                .fallback
                .as_ref()
                .map_or("its own".to_string(), |why| format!("all groups' ({})", escape(why)))
        );
    }
    let _ = writeln!(out, "</tbody></table>");
    for (i, figure) in segment_figures.iter().enumerate() {
        let Some(figure) = figure else { continue };
        let segment = &summary.segments[i];
        let _ = writeln!(
            out,
            "<section class=\"segment\" id=\"segment-{}\"><h3>{}</h3><p>{} groups; prior {}.</p>",
            i + 1,
            escape(&segment_name(summary, i)),
            segment.groups,
            escape(&prior_text(&segment.fitted_prior, model))
        );
        if let Some(checks) = &segment.checks {
            let _ = writeln!(out, "<p>{}</p>", checks_text(checks));
        }
        figure_html(figure, out);
        let _ = writeln!(out, "</section>");
    }
    if summary.segments.len() > SEGMENT_PLOTS {
        let _ = writeln!(
            out,
            "<p>The first {SEGMENT_PLOTS} of {} segments have a plot of their own; the table lists all.</p>",
            summary.segments.len()
        );
    }
    let _ = writeln!(out, "</section>");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn text_is_escaped_and_numbers_read_well() {
        assert_eq!(escape("<a & 'b'>"), "&lt;a &amp; &#39;b&#39;&gt;");
        assert_eq!(num(20000.0), "20000");
        assert_eq!(num(0.90083), "0.9008");
        assert_eq!(num(18.2958), "18.30");
        assert_eq!(num(3e-7), "3.000e-7");
        assert_eq!(num(f64::NAN), "n/a");
    }
}
