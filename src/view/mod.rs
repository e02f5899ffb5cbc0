//! The report layer: one self-contained HTML page of a run (inline SVG, no
//! scripts, no network), drawn from its output table and its summary, so
//! that `ratepool report` and `fit --report` give the same bytes for the same
//! inputs. Nothing here computes a posterior: the page shows what the run
//! wrote.

pub mod collect;
mod page;
pub mod plots;

use crate::core::model::{Model, RateLaw};
use crate::error::{Error, Result};
use crate::io::atomic::stage_bytes;
use crate::summary::Summary;
use std::path::Path;

/// What a report is drawn from and where it goes.
pub struct ReportRequest<'a> {
    /// The run's output table (CSV or Parquet).
    pub table: &'a Path,
    /// The run's summary.
    pub summary: &'a Summary,
    /// The HTML file to write.
    pub output: &'a Path,
    /// A folder to write each plot into as its own file, too.
    pub plots: Option<&'a Path>,
    /// The format of those files.
    pub plot_format: PlotFormat,
    /// Seed of the samples drawn for the scatter plots.
    pub seed: u64,
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

/// Writes the report (atomically) and, when asked, each plot beside it.
pub fn write_report(request: &ReportRequest<'_>) -> Result<()> {
    let summary = request.summary;
    let model = Model::from_name(&summary.model)
        .ok_or_else(|| Error::Input(format!("unknown model '{}' in the summary", summary.model)))?;
    let collected = collect::collect(request.table, summary, model, request.seed)?;
    if collected.groups != summary.groups {
        return Err(Error::Input(format!(
            "{}: {} groups, but the summary describes {}; give the table and summary of the same run",
            request.table.display(),
            collected.groups,
            summary.groups
        )));
    }
    let (figures, segment_figures) = page::figures(summary, model, &collected, prior_law(summary, model))?;
    let html = page::render(summary, model, &collected, &figures, &segment_figures);
    let mut staged = crate::io::atomic::StagedOutputs::default();
    staged.add(stage_bytes(request.output, html.as_bytes())?);
    if let Some(folder) = request.plots {
        std::fs::create_dir_all(folder)
            .map_err(|e| Error::io(format!("cannot create the folder {}", folder.display()), e))?;
        for figure in figures.iter().chain(segment_figures.iter().flatten()) {
            match request.plot_format {
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
