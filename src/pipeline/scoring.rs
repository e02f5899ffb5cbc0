//! What every path writes: the output columns of scored rows, the rejects
//! table, and the summary, all from the pair table and its posteriors.

use super::prior::Scored;
use super::segments::segment_pair_values;
use super::validate::{cell_text, ColumnNames, Rejection};
use super::{FlagEvent, Intervals, Job, PriorShape, Thresholds};
use crate::core::diagnostics::Pull;
use crate::core::model::Posterior;
use crate::core::pairs::WeightedPair;
use crate::core::ranking::{competition_ranks, RankOrder, TopMethod};
use crate::error::Result;
use crate::io::atomic::StagedOutputs;
use crate::io::cells::Cell;
use crate::io::pair_chunks::{ComputedKind, ComputedValues, PairFunction};
use crate::io::sink::{ColumnValues, Columns, Metadata, PairColumns, PairValues};
use crate::summary::{
    ColumnsReport, FlagReport, PullReport, SegmentReport, Summary, ThresholdReport, TopReport,
};
use arrow_array::ArrayRef;
use std::sync::Arc;

/// Pair-valued columns are held, not computed as they are written, when
/// there are at least this many groups to a pair.
const HELD_BELOW_GROUPS_PER_PAIR: f64 = 16.0;

/// The raw value's column: the model's, or `smr` (the trade's name for
/// observed over expected) when the expected counts were made by standardisation.
pub fn raw_column(job: &Job) -> &'static str {
    match job.aggregation {
        super::Aggregation::Standardised(_) => "smr",
        _ => job.model.terms().raw_column,
    }
}

/// The output columns after the group column, each as its value per pair
/// of the table (every one is a function of the row's pair): the segment
/// or covariate values, the counts under their input names, the raw value,
/// the prior centre (with covariates), the posterior summaries and
/// parameters, and the columns asked for.
pub fn pair_columns(job: &Job, scored: &Scored) -> Result<PairColumns> {
    // Where pairs repeat (far fewer pairs than groups) a column is held, a few
    // bytes a row, which is quicker to write; where most groups are pairs of
    // their own (covariates), it is a view of what the run holds anyway,
    // computed as each row group is written rather than copied.
    let pair_count = scored.pairs.len();
    let groups: f64 = scored.pairs.iter().map(|p| p.weight).sum();
    let held = pair_count as f64 * HELD_BELOW_GROUPS_PER_PAIR <= groups;
    let column = |kind: ComputedKind, value: PairFunction| {
        let values = ComputedValues::new(pair_count, kind, value);
        if held {
            values.held(0..pair_count)
        } else {
            PairValues::Computed(values)
        }
    };
    let of_pairs = |kind: ComputedKind, f: fn(&WeightedPair) -> Option<f64>| {
        let pairs = Arc::clone(&scored.pairs);
        column(kind, Arc::new(move |p| f(&pairs[p])))
    };
    let of_posteriors = |kind: ComputedKind, f: fn(&Posterior) -> Option<f64>| {
        let posteriors = Arc::clone(&scored.posteriors);
        column(kind, Arc::new(move |p| f(&posteriors.get(p))))
    };
    let of_values = |values: &Arc<Vec<f64>>| {
        let values = Arc::clone(values);
        column(ComputedKind::Floats, Arc::new(move |p| Some(values[p])))
    };
    let terms = job.model.terms();
    let whole_or_not = |whole: bool| if whole { ComputedKind::Integers } else { ComputedKind::Floats };
    let sizes = of_pairs(whole_or_not(terms.size_rule.is_whole()), |p| Some(p.size));
    let counts = of_pairs(whole_or_not(terms.count_rule.is_whole()), |p| Some(p.count));
    let parameter = |i: usize| {
        let values = match i {
            0 => of_posteriors(ComputedKind::OptionalFloats, |p| p.natural.map(|natural| natural[0])),
            _ => of_posteriors(ComputedKind::OptionalFloats, |p| p.natural.map(|natural| natural[1])),
        };
        (format!("posterior_param_{}", terms.parameter_names[i]), values)
    };
    let raw = {
        let pairs = Arc::clone(&scored.pairs);
        column(
            ComputedKind::OptionalFloats,
            Arc::new(move |p| terms.raw_value(pairs[p].size, pairs[p].count)),
        )
    };
    let samples: Vec<&[ArrayRef]> = scored.segments.iter().map(|s| &s.samples[..]).collect();
    let segment_values = segment_pair_values(&samples, &scored.segment_of_pair())?;
    let mut columns: PairColumns = job.segments.iter().cloned().zip(segment_values).collect();
    if let Some(covariates) = &scored.covariates {
        columns.extend(covariates.values.per_pair().iter().cloned());
    }
    columns.extend([
        (job.columns.count.clone(), counts),
        (job.columns.size.clone(), sizes),
        (raw_column(job).to_string(), raw),
    ]);
    if let Some(covariates) = &scored.covariates {
        let own = Arc::clone(&covariates.own);
        columns.push((
            "prior_mean".to_string(),
            column(ComputedKind::Floats, Arc::new(move |p| Some(own.centre(p)))),
        ));
        if let Some(counts) = &covariates.neighbours {
            columns.push(("neighbours".to_string(), PairValues::Integers(counts.clone())));
        }
    }
    columns.extend([
        ("posterior_mean".to_string(), of_posteriors(ComputedKind::Floats, |p| Some(p.mean))),
        ("posterior_sd".to_string(), of_posteriors(ComputedKind::Floats, |p| Some(p.sd))),
        ("interval_lo".to_string(), of_posteriors(ComputedKind::Floats, |p| Some(p.lower))),
        ("interval_hi".to_string(), of_posteriors(ComputedKind::Floats, |p| Some(p.upper))),
        ("pool_weight".to_string(), of_posteriors(ComputedKind::Floats, |p| Some(p.pool_weight))),
    ]);
    // A free prior's posteriors are masses on its grid: no law's parameters.
    if job.prior_shape == PriorShape::Parametric {
        columns.extend([parameter(0), parameter(1)]);
    }
    if !scored.segments.is_empty() {
        let mut fallback = vec![false; pair_count];
        for segment in scored.segments.iter().filter(|s| s.fallback.is_some()) {
            fallback[segment.pairs.clone()].fill(true);
        }
        columns.push(("prior_fallback".to_string(), PairValues::Booleans(fallback)));
    }
    if let Some(order) = job.ranks {
        let weights: Vec<f64> = scored.pairs.iter().map(|p| p.weight).collect();
        columns.extend(rank_columns(
            order,
            &weights,
            scored.posteriors.iter().map(|p| (p.mean, p.lower, p.upper)),
        ));
    }
    let exceedance = [("prob_above", &scored.prob_above), ("prob_below", &scored.prob_below)];
    for (name, values) in exceedance {
        if let Some(values) = values {
            columns.push((name.to_string(), of_values(values)));
        }
    }
    if let Some((values, _)) = &scored.prob_top {
        columns.push(("prob_top".to_string(), PairValues::Floats(values.clone())));
    }
    if let Some(flags) = &scored.flags {
        columns.push(("flagged".to_string(), PairValues::Booleans(flags.flagged.clone())));
        columns.push(("flag_fdr".to_string(), PairValues::Floats(flags.fdr.clone())));
    }
    Ok(columns)
}

/// `rank_mean` and `rank_conservative` (by the interval's end nearer the
/// bottom of the order) from each key's posterior (mean, lower, upper) and
/// the number of groups sharing it.
pub fn rank_columns(
    order: RankOrder,
    weights: &[f64],
    summaries: impl Iterator<Item = (f64, f64, f64)>,
) -> [(String, PairValues); 2] {
    let (means, bounds): (Vec<f64>, Vec<f64>) = summaries
        .map(|(mean, lower, upper)| match order {
            RankOrder::HighestFirst => (mean, lower),
            RankOrder::LowestFirst => (mean, upper),
        })
        .unzip();
    [
        ("rank_mean".to_string(), PairValues::Integers(competition_ranks(&means, weights, order))),
        ("rank_conservative".to_string(), PairValues::Integers(competition_ranks(&bounds, weights, order))),
    ]
}

/// The pair posterior table: one row per distinct (segment, size, count)
/// with the number of groups sharing it and every per-pair output column,
/// for joining back to the rows on the segment and count columns.
pub fn pair_table_columns(job: &Job, scored: &Scored) -> Result<Columns> {
    let mut columns: Columns =
        pair_columns(job, scored)?.into_iter().map(|(name, values)| (name, values.into_column())).collect();
    // The segment or covariate columns and the count columns come first; the group count follows them.
    let rest = columns.split_off(job.segments.len() + job.covariates.len() + 2);
    let weights = scored.pairs.iter().map(|p| p.weight as i64).collect();
    columns.push(("group_count".to_string(), ColumnValues::Integers(weights)));
    columns.extend(rest);
    Ok(columns)
}

/// Stages the pair posterior table, when one was asked for.
pub fn stage_pair_output(job: &Job, scored: &Scored, staged: &mut StagedOutputs) -> Result<()> {
    if let Some(path) = &job.pair_output {
        staged.add(crate::io::sink::write_table(
            pair_table_columns(job, scored)?,
            path,
            table_metadata(job, scored),
        )?);
    }
    Ok(())
}

/// What a scored table says of itself in its Parquet footer, under keys of
/// its own: the ratepool version, the model, the level, the interval method,
/// the prior (as in the summary) and each segment's prior.
pub fn table_metadata(job: &Job, scored: &Scored) -> Metadata {
    let json = |value: serde_json::Value| value.to_string();
    let mut metadata = vec![
        ("ratepool.version".to_string(), env!("CARGO_PKG_VERSION").to_string()),
        ("ratepool.model".to_string(), job.model.name().to_string()),
        ("ratepool.level".to_string(), job.level.get().to_string()),
        (
            "ratepool.intervals".to_string(),
            match job.intervals {
                Intervals::PlugIn => "plug-in",
                Intervals::Corrected => "corrected",
            }
            .to_string(),
        ),
        ("ratepool.prior".to_string(), json(serde_json::json!(scored.fitted_prior))),
    ];
    if !scored.segments.is_empty() {
        let segments: Vec<serde_json::Value> = scored
            .segments
            .iter()
            .map(|s| {
                let key: std::collections::BTreeMap<&String, &Option<String>> =
                    job.segments.iter().zip(&s.key).collect();
                serde_json::json!({ "key": key, "prior": s.fitted_prior, "fallback": s.fallback })
            })
            .collect();
        metadata.push(("ratepool.segments".to_string(), json(serde_json::Value::Array(segments))));
    }
    metadata
}

/// Rejected rows gathered for the rejects table, as found in the input.
#[derive(Default)]
pub struct RejectRows {
    rows: Vec<i64>,
    groups: Vec<String>,
    counts: Vec<String>,
    sizes: Vec<String>,
    columns: Vec<String>,
    reasons: Vec<String>,
}

impl RejectRows {
    /// Adds a rejected row (`row` 1-based), its raw values and the reason.
    pub fn push(&mut self, row: usize, group: String, count: &Cell, size: &Cell, rejection: &Rejection) {
        self.rows.push(row as i64);
        self.groups.push(group);
        self.counts.push(cell_text(count));
        self.sizes.push(cell_text(size));
        self.columns.push(rejection.column.clone());
        self.reasons.push(rejection.reason.clone());
    }

    /// True when no row was rejected.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    /// Takes the rows held, as the columns of the rejects table (without a
    /// size column when `names.size` is empty: rows of trials have none).
    pub fn take_columns(&mut self, names: &ColumnNames) -> Columns {
        let taken = std::mem::take(self);
        let mut columns = vec![
            ("row".to_string(), ColumnValues::Integers(taken.rows)),
            (names.group.clone(), ColumnValues::Texts(taken.groups)),
            (names.count.clone(), ColumnValues::Texts(taken.counts)),
        ];
        if !names.size.is_empty() {
            columns.push((names.size.clone(), ColumnValues::Texts(taken.sizes)));
        }
        columns.push(("column".to_string(), ColumnValues::Texts(taken.columns)));
        columns.push(("reason".to_string(), ColumnValues::Texts(taken.reasons)));
        columns
    }
}

/// Counts of rows seen by a run.
pub struct RowCounts {
    /// Data rows in the input.
    pub read: u64,
    /// Rows rejected.
    pub rejected: u64,
}

/// The pull report of a pull summary, naming the group that moved furthest.
pub fn pull_report(p: &Pull, max_shift_group: Option<String>) -> PullReport {
    PullReport {
        pool_weight_mean: p.pool_weight_mean,
        pool_weight_median: p.pool_weight_median,
        pool_weight_p10: p.pool_weight_p10,
        pool_weight_p90: p.pool_weight_p90,
        mean_abs_shift: p.mean_abs_shift,
        max_abs_shift: p.max_abs_shift,
        max_shift_group,
        rank_correlation: p.rank_correlation,
    }
}

/// Groups whose ids the summary names: the one that moved furthest over
/// all groups and in each segment (None when the groups were not read).
#[derive(Debug, Default)]
pub struct ShiftGroups {
    /// Over all groups.
    pub all: Option<String>,
    /// Per segment, in the order of [`Scored::segments`].
    pub segments: Vec<Option<String>>,
}

/// Finds, as rows are written, the ids of the groups the summary names:
/// the first group of the pair that moved furthest over all groups, and of
/// the one that moved furthest in each segment.
pub struct ShiftTracker {
    furthest: u32,
    furthest_in: Vec<u32>,
    found: ShiftGroups,
}

impl ShiftTracker {
    /// The pairs to look for, from the pull summaries.
    pub fn new(scored: &Scored) -> Self {
        let pair = |p: Option<usize>| p.map_or(u32::MAX, |p| p as u32);
        ShiftTracker {
            furthest: pair(scored.pull.max_shift_row),
            furthest_in: scored.segments.iter().map(|s| pair(s.pull.max_shift_row)).collect(),
            found: ShiftGroups { all: None, segments: vec![None; scored.segments.len()] },
        }
    }

    /// A row of `pair` in the segment at `place`, its id given by `id` when needed.
    pub fn observe(&mut self, pair: u32, place: u32, id: impl Fn() -> String) {
        if pair == self.furthest && self.found.all.is_none() {
            self.found.all = Some(id());
        }
        if self.furthest_in.get(place as usize) == Some(&pair) {
            self.found.segments[place as usize].get_or_insert_with(id);
        }
    }

    /// The ids found.
    pub fn finish(self) -> ShiftGroups {
        self.found
    }
}

/// The summary's `rank_order`: the order of the ranks, or of `prob_top`
/// (highest first unless ranked otherwise); None with neither.
pub fn rank_order_words(ranks: Option<RankOrder>, top: bool) -> Option<String> {
    ranks.or(top.then_some(RankOrder::HighestFirst)).map(|order| {
        match order {
            RankOrder::HighestFirst => "highest-first",
            RankOrder::LowestFirst => "lowest-first",
        }
        .to_string()
    })
}

/// The run's summary.
pub fn summarise(job: &Job, rows: RowCounts, scored: &Scored, mut named: ShiftGroups) -> Summary {
    let mut warnings = scored.warnings.clone();
    if rows.rejected > 0 {
        warnings.push(format!("{} rows were rejected and left out of the fit and the output", rows.rejected));
    }
    named.segments.resize(scored.segments.len(), None);
    let segments = scored
        .segments
        .iter()
        .zip(named.segments)
        .map(|(segment, shift_group)| SegmentReport {
            key: job.segments.iter().cloned().zip(segment.key.iter().cloned()).collect(),
            groups: segment.groups as u64,
            fitted_prior: segment.fitted_prior.clone(),
            fit: segment.fit.clone(),
            pull: pull_report(&segment.pull, shift_group),
            fallback: segment.fallback.clone(),
            checks: Some(segment.checks.clone()),
        })
        .collect();
    Summary {
        format_version: crate::summary::SUMMARY_FORMAT_VERSION,
        model: job.model.name().to_string(),
        groups: scored.pairs.iter().map(|p| p.weight).sum::<f64>() as u64,
        rows_read: rows.read,
        rows_rejected: rows.rejected,
        level: job.level.get(),
        intervals: match job.intervals {
            Intervals::PlugIn => "plug-in",
            Intervals::Corrected => "corrected",
        }
        .to_string(),
        fitted_prior: scored.fitted_prior.clone(),
        fit: scored.fit.clone(),
        pull: pull_report(&scored.pull, named.all),
        segment_columns: job.segments.clone(),
        segments,
        segment_test: scored.segment_test.clone(),
        checks: Some(scored.checks.clone()),
        thresholds: (job.thresholds != Thresholds::default())
            .then_some(ThresholdReport { above: job.thresholds.above, below: job.thresholds.below }),
        flags: job.flag_fdr.zip(scored.flags.as_ref()).map(|(rule, flags)| FlagReport {
            event: match rule.event {
                FlagEvent::Above => "above",
                FlagEvent::Below => "below",
            }
            .to_string(),
            threshold: match rule.event {
                FlagEvent::Above => job.thresholds.above,
                FlagEvent::Below => job.thresholds.below,
            }
            .expect("a flag rule has its threshold"),
            fdr_level: rule.bound,
            groups_flagged: flags.groups_flagged as u64,
            expected_false_flags: flags.expected_false,
        }),
        standardisation: None,
        neighbourhood: scored.neighbourhood.clone(),
        prior_comparison: scored.comparison.clone(),
        columns: Some(ColumnsReport {
            group: job.columns.group.clone(),
            count: job.columns.count.clone(),
            size: job.columns.size.clone(),
        }),
        rank_order: rank_order_words(job.ranks, job.top.is_some()),
        top: job.top.zip(scored.prob_top.as_ref()).map(|(rule, (_, method))| TopReport {
            k: rule.k as u64,
            method: match method {
                TopMethod::Draws { .. } => "draws",
                TopMethod::Threshold { .. } => "threshold",
            }
            .to_string(),
            draws: match method {
                TopMethod::Draws { draws, .. } => Some(*draws as u64),
                TopMethod::Threshold { .. } => None,
            },
            seed: matches!(method, TopMethod::Draws { .. }).then_some(job.seed),
            threshold: match method {
                TopMethod::Threshold { threshold } => Some(*threshold),
                TopMethod::Draws { .. } => None,
            },
        }),
        warnings,
    }
}
