//! The report layer: one self-contained HTML page of a run (inline SVG, no
//! scripts, no network), drawn from its output table and its summary, so
//! that `ratepool report` and `fit --report` give the same bytes for the same
//! inputs. Nothing here computes a posterior: the page shows what the run
//! wrote.

pub mod collect;
pub mod levels;
pub mod map;
mod page;
pub mod plots;

use crate::core::model::{Model, RateLaw};
use crate::error::{Error, Result};
use crate::io::atomic::stage_bytes;
use crate::summary::Summary;
use std::path::Path;

/// What a report is drawn from and where it goes: the summary of a run of
/// one of the scalar models, or a [`crate::summary::LevelSummary`] (star
/// ratings, [`levels::write_level_report`]).
pub struct ReportRequest<'a, S = Summary> {
    /// The run's output table (CSV or Parquet).
    pub table: &'a Path,
    /// The run's summary.
    pub summary: &'a S,
    /// The HTML file to write.
    pub output: &'a Path,
    /// A folder to write each plot into as its own file, too.
    pub plots: Option<&'a Path>,
    /// The format of those files.
    pub plot_format: PlotFormat,
    /// Seed of the samples drawn for the scatter plots.
    pub seed: u64,
    /// A map of the groups (areas) to draw, when asked for (`--map`).
    pub map: Option<&'a map::ReportMap>,
}

/// The format of the plots written alone.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum PlotFormat {
    /// SVG, as on the page.
    #[default]
    Svg,
    /// PNG, rasterised from the SVG.
    Png,
}

/// One plot of the page.
pub struct Figure {
    /// File and element name.
    pub name: String,
    /// Heading.
    pub title: String,
    /// What it shows, in words.
    pub caption: String,
    /// The SVG document.
    pub svg: String,
}

/// The prior's law, when the prior is a proper one (None at complete pooling).
fn prior_law(summary: &Summary, model: Model) -> Option<RateLaw> {
    match summary.fitted_prior.natural(model.terms()) {
        [Some(a), Some(b)] => Some((model.terms().law_of)([a, b])),
        _ => None,
    }
}

/// How a run's map is worded and coloured. Rates and proportions are
/// shown as ratios: centred on 1 where they are observed over expected
/// counts (standardised, or a rate model whose all-groups mean lies between
/// 0.5 and 2, as with expected counts for exposure), otherwise on the
/// all-groups prior mean; estimates on steps of their spread about it.
fn map_terms<'a>(summary: &Summary, model: Model, table: &collect::TableAreas) -> map::MapTerms<'a> {
    let terms = model.terms();
    let mean = summary.fitted_prior.mean();
    let raw_name = match collect::raw_column_of(summary, model) {
        "smr" => "SMR",
        "raw_rate" => "raw rate",
        "raw_proportion" => "raw proportion",
        _ => "raw estimate",
    };
    let expected_counts = summary.standardisation.is_some()
        || (terms.rates == crate::core::model::RateRange::NonNegative && (0.5..=2.0).contains(&mean));
    let (scale, scale_words) = match terms.raw_value {
        crate::core::model::RawValue::Ratio if expected_counts => {
            (map::ColourScale::ratio(1.0), "observed over expected (1: as expected)".to_string())
        }
        crate::core::model::RawValue::Ratio => (
            map::ColourScale::ratio(mean),
            format!("classes at ratios to the all-groups prior mean {}", page::num(mean)),
        ),
        crate::core::model::RawValue::Count => {
            let raws: Vec<f64> = table.values.values().filter_map(|v| v.raw).collect();
            let spread = if raws.len() > 1 {
                let centre = raws.iter().sum::<f64>() / raws.len() as f64;
                (raws.iter().map(|r| (r - centre).powi(2)).sum::<f64>() / (raws.len() - 1) as f64).sqrt()
            } else {
                1.0
            };
            let step = if spread > 0.0 { spread } else { 1.0 };
            (
                map::ColourScale::additive(mean, step),
                format!(
                    "classes at steps of {} about the all-groups prior mean {}",
                    page::num(step),
                    page::num(mean)
                ),
            )
        }
    };
    map::MapTerms { raw_name, scale, scale_words, above: summary.thresholds.as_ref().and_then(|t| t.above) }
}

/// Writes the report (atomically) and, when asked, each plot beside it.
pub fn write_report(request: &ReportRequest<'_>) -> Result<()> {
    let summary = request.summary;
    let model = Model::from_name(&summary.model)
        .ok_or_else(|| Error::Input(format!("unknown model '{}' in the summary", summary.model)))?;
    let collected = collect::collect(request.table, summary, model, request.seed)?;
    refuse_other_run(request.table, collected.groups, summary.groups)?;
    let (mut figures, segment_figures) =
        page::figures(summary, model, &collected, prior_law(summary, model))?;
    if let Some(shown) = request.map {
        let keys = shown.areas.iter().map(|a| a.key.as_str()).collect();
        let table = collect::area_values(request.table, summary, model, &keys)?;
        figures.extend(map::map_figures(shown, &table, &map_terms(summary, model, &table))?);
    }
    let html = page::render(summary, model, &collected, &figures, &segment_figures);
    let all = figures.iter().chain(segment_figures.iter().flatten());
    write_page(&html, all, request.output, request.plots, request.plot_format)
}

/// Refuses a table whose groups (`read`) are not the summary's (`described`).
fn refuse_other_run(table: &Path, read: u64, described: u64) -> Result<()> {
    if read == described {
        return Ok(());
    }
    Err(Error::Input(format!(
        "{}: {read} groups, but the summary describes {described}; give the table and summary of the same run",
        table.display()
    )))
}

/// Writes a page and, into `plots` when given, each figure as its own file,
/// all or nothing.
fn write_page<'a>(
    html: &str,
    figures: impl Iterator<Item = &'a Figure>,
    output: &Path,
    plots: Option<&Path>,
    plot_format: PlotFormat,
) -> Result<()> {
    let mut staged = crate::io::atomic::StagedOutputs::default();
    staged.add(stage_bytes(output, html.as_bytes())?);
    if let Some(folder) = plots {
        std::fs::create_dir_all(folder)
            .map_err(|e| Error::io(format!("cannot create the folder {}", folder.display()), e))?;
        for figure in figures {
            match plot_format {
                PlotFormat::Svg => staged
                    .add(stage_bytes(&folder.join(format!("{}.svg", figure.name)), figure.svg.as_bytes())?),
                PlotFormat::Png => {
                    let png = plots::to_png(&figure.svg)?;
                    staged.add(stage_bytes(&folder.join(format!("{}.png", figure.name)), &png)?)
                }
            }
        }
    }
    staged.commit()
}
