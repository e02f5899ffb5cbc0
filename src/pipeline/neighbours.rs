//! The neighbour prior (`--neighbours FILE`): the table of neighbouring
//! areas read and matched to the areas scored, and each area's prior fitted
//! by moments to its neighbourhood ([`crate::core::model::neighbourhood`],
//! Marshall 1991).
//!
//! The areas ride through the passes as a covariate key of one word, the
//! area's number (its group id read as a level; a summed group's place), so
//! every row finds its own area's prior as a covariate run's rows find
//! theirs, and the scoring after it is the covariate run's.

use super::covariates::{CellPriors, CovariatePairs, CovariateState, CovariateValues, OwnPriors};
use super::validate::row_fault;
use super::{Job, DEFAULT_BATCH_ROWS};
use crate::core::model::neighbourhood::{local_priors, LocalPrior, Neighbourhoods};
use crate::core::model::Prior;
use crate::core::pairs::WeightedPair;
use crate::error::{Error, Result};
use crate::io::cells::GroupColumn;
use crate::io::input::Input;
use crate::summary::{FitReport, FittedPrior, NeighbourhoodReport};
use std::collections::HashMap;
use std::path::Path;
use std::sync::Arc;

/// The areas of a neighbour run and who neighbours whom among them.
pub(super) struct AreaTable {
    /// The distinct (area, exposure, events) keys, one an area, in the order met.
    pub pairs: Arc<Vec<WeightedPair>>,
    /// Each pair's area number.
    area_of_pair: Vec<u32>,
    /// The neighbour relation over area numbers.
    neighbourhoods: Neighbourhoods,
    /// Whether each area number has a pair (a number whose only row was
    /// taken back out as a repeat has none).
    scored: Vec<bool>,
    /// The table as read, for the summary.
    report: NeighbourhoodReport,
}

/// Reads the neighbour table of `job` and matches it to the areas counted
/// (`pairs`, keyed by area number; `state` names the numbers).
pub(super) fn area_table(job: &Job, pairs: &CovariatePairs, state: &CovariateState) -> Result<AreaTable> {
    let path = job.neighbours.as_deref().expect("a neighbour run has a neighbour table");
    let names = state.area_names();
    let area_of_pair: Vec<u32> = (0..pairs.len()).map(|pair| pairs.covariate_word(pair, 0) as u32).collect();
    let mut scored = vec![false; names.len()];
    for &area in &area_of_pair {
        scored[area as usize] = true;
    }
    let by_name: HashMap<&str, u32> = names
        .iter()
        .enumerate()
        .filter(|(area, _)| scored[*area])
        .map(|(area, name)| (name.as_str(), area as u32))
        .collect();
    let read = read_pairs(job, path, &by_name)?;
    let neighbourhoods = Neighbourhoods::from_pairs(names.len(), read.pairs);
    let degrees = (0..names.len()).filter(|&a| scored[a]).map(|a| neighbourhoods.of(a).len() as u64);
    let (areas, links, lonely) =
        degrees.fold((0, 0, 0), |(n, links, lonely), d| (n + 1, links + d, lonely + u64::from(d == 0)));
    let report = NeighbourhoodReport {
        file: path.display().to_string(),
        rows: read.rows,
        areas,
        pairs: links / 2,
        without_neighbours: lonely,
        zero_variance: 0,
        rows_left_out: read.left_out,
        first_left_out: read.first_left_out,
    };
    Ok(AreaTable { pairs: pairs.pairs(), area_of_pair, neighbourhoods, scored, report })
}

/// The rows of a neighbour table as area numbers.
struct ReadPairs {
    pairs: Vec<(u32, u32)>,
    rows: u64,
    left_out: u64,
    first_left_out: Option<String>,
}

/// Reads the first two columns of the neighbour table at `path` (an area
/// and its neighbour, by the ids of `--group`); a row naming an area not
/// scored is left out and counted, a missing id is an error naming its row
/// and column.
fn read_pairs(job: &Job, path: &Path, by_name: &HashMap<&str, u32>) -> Result<ReadPairs> {
    let names = Input::column_names(path, job.delimiter)?;
    if names.len() < 2 {
        return Err(Error::Input(format!(
            "{}: a neighbour table needs two columns, an area and its neighbour (by the ids of the column '{}'); it has {}",
            path.display(),
            job.columns.group,
            names.len()
        )));
    }
    let columns = [(names[0].as_str(), "area"), (names[1].as_str(), "neighbour")];
    let input = Input::open(path, job.delimiter, &columns, DEFAULT_BATCH_ROWS)?;
    let mut read = ReadPairs { pairs: Vec::new(), rows: 0, left_out: 0, first_left_out: None };
    input.for_each_batch(|batch| {
        let ids = [GroupColumn::of(&batch.columns[0])?, GroupColumn::of(&batch.columns[1])?];
        for row in 0..batch.rows() {
            let mut found = [None; 2];
            for (side, column) in ids.iter().enumerate() {
                if column.is_missing(row) {
                    return Err(row_fault(
                        batch.file,
                        batch.first_row_in_file + row,
                        names[side].clone(),
                        format!("missing {}", columns[side].1),
                    ));
                }
                found[side] = column.with_bytes(row, |id| {
                    std::str::from_utf8(id).ok().and_then(|id| by_name.get(id).copied())
                });
            }
            match found {
                [Some(area), Some(neighbour)] => read.pairs.push((area, neighbour)),
                _ => {
                    read.left_out += 1;
                    if read.first_left_out.is_none() {
                        let side = usize::from(found[0].is_some());
                        read.first_left_out = Some(ids[side].text(row));
                    }
                }
            }
        }
        read.rows += batch.rows() as u64;
        Ok(())
    })?;
    if read.rows > 0 && read.pairs.is_empty() {
        return Err(Error::Input(format!(
            "{}: none of its {} rows names two areas of the input (the first area not found: '{}'); its first two columns must hold the ids of the column '{}'",
            path.display(),
            read.rows,
            read.first_left_out.as_deref().unwrap_or_default(),
            job.columns.group
        )));
    }
    Ok(read)
}

/// The all-areas prior a neighbour run falls back on, as fitted.
pub(super) struct AllAreas<'a> {
    /// The prior fitted to all areas.
    pub prior: &'a Prior,
    /// Its wire form, which the summary's `prior` holds.
    pub fitted_prior: &'a FittedPrior,
    /// How it was fitted.
    pub fit: &'a FitReport,
    /// Its boundary warnings.
    pub warnings: &'a [String],
}

/// Each area's prior from its neighbourhood, made a prior of the family's
/// law by `local`; an area without neighbours (or whose neighbourhood has no
/// exposure) takes the all-areas prior.
pub(super) fn neighbour_cell_priors(
    table: AreaTable,
    all: AllAreas<'_>,
    local: fn(&LocalPrior) -> Prior,
) -> (Arc<Vec<WeightedPair>>, CellPriors) {
    let AreaTable { pairs, area_of_pair, neighbourhoods, scored, mut report } = table;
    let areas = neighbourhoods.areas();
    let (mut events, mut exposure) = (vec![0.0; areas], vec![0.0; areas]);
    for (pair, &area) in pairs.iter().zip(&area_of_pair) {
        events[area as usize] = pair.count;
        exposure[area as usize] = pair.size;
    }
    let locals = local_priors(&events, &exposure, &neighbourhoods);
    report.zero_variance =
        (0..areas).filter(|&a| scored[a] && locals[a].is_some_and(|l| l.variance == 0.0)).count() as u64;
    let all_mean = all.fitted_prior.mean();
    let (mut priors, mut centres) = (Vec::with_capacity(pairs.len()), Vec::with_capacity(pairs.len()));
    let mut cells = CellPriors {
        own: Arc::new(OwnPriors::Held { priors: Vec::new(), centres: Vec::new() }),
        uncertainties: Vec::new(),
        values: CovariateValues::PerPair(Vec::new()),
        fitted_prior: all.fitted_prior.clone(),
        fit: all.fit.clone(),
        warnings: all.warnings.to_vec(),
        neighbours: None,
    };
    let mut counts = Vec::with_capacity(pairs.len());
    for &area in &area_of_pair {
        let area = area as usize;
        counts.push(neighbourhoods.of(area).len() as i64);
        match &locals[area] {
            Some(own) => {
                priors.push(local(own));
                centres.push(own.mean);
            }
            None => {
                priors.push(*all.prior);
                centres.push(all_mean);
            }
        }
    }
    cells.own = Arc::new(OwnPriors::Held { priors, centres });
    let fell_back = locals.iter().zip(&scored).filter(|(l, &s)| s && l.is_none()).count();
    report.without_neighbours = fell_back as u64;
    if fell_back > 0 {
        cells.warnings.push(format!(
            "{fell_back} of {} areas have no neighbour among the areas scored (or none with exposure): they take the prior fitted to all areas, and `neighbours` is 0 for them",
            report.areas
        ));
    }
    if report.rows_left_out > 0 {
        cells.warnings.push(format!(
            "{} of the {} rows of the neighbour table {} name an area that is not among those scored (the first: '{}'); they were left out",
            report.rows_left_out,
            report.rows,
            report.file,
            report.first_left_out.as_deref().unwrap_or_default()
        ));
    }
    cells.neighbours = Some((counts, report));
    (pairs, cells)
}
