//! Expected counts by indirect standardisation (`--population`, `--strata`):
//! the rules for a row of an area in a stratum (whole events, a population
//! of at least zero, no events on no population), each stratum's reference
//! rate (pooled over every area's valid rows, the internal standard, or read
//! from `--reference-rates`, an external one), and each row's expected
//! count, its population times its stratum's rate. The areas' sums of events
//! and expected counts then go to the gamma-Poisson model as any summed rows.

use super::segments::{SegmentColumns, SegmentIndex};
use super::validate::{Rejection, MAX_EXACT_COUNT};
use super::{Job, PriorSource, Standardisation};
use crate::error::{Error, Result};
use crate::io::cells::{cell_at, Cell, NumericColumn};
use crate::io::input::{Input, STRATUM_ROLE};
use crate::summary::{StandardisationReport, StratumRate};
use arrow_array::ArrayRef;
use std::cell::RefCell;
use std::collections::HashMap;
use std::path::Path;

/// The events and population columns of one batch, read once.
pub struct StratumRows {
    events: NumericColumn,
    population: NumericColumn,
}

impl StratumRows {
    /// Reads the events and population columns of a batch.
    pub fn of(events: &ArrayRef, population: &ArrayRef) -> Result<Self> {
        Ok(StratumRows {
            events: NumericColumn::of(events)?,
            population: NumericColumn::of_reals(population)?,
        })
    }

    /// (events, population) of `row`, or which of the two columns (0 or 1)
    /// is at fault and why.
    pub fn read(
        &self,
        arrays: [&ArrayRef; 2],
        row: usize,
    ) -> Result<std::result::Result<(f64, f64), (usize, String)>> {
        let events = match self.events.integer(row) {
            Some(k) if (0..=MAX_EXACT_COUNT as i64).contains(&k) => k as f64,
            Some(k) if k < 0 => {
                return Ok(Err((0, format!("is negative ({k}); events are counts of 0 or more"))))
            }
            _ => {
                return Ok(Err(match cell_at(arrays[0], row)? {
                    Cell::Missing => (0, "is missing".to_string()),
                    cell => (
                        0,
                        format!("is not a whole number of events ({})", super::validate::cell_text(&cell)),
                    ),
                }))
            }
        };
        let population = match self.population.number(row) {
            Some(p) if (0.0..=super::validate::MAX_MAGNITUDE).contains(&p) => p,
            Some(p) if p < 0.0 => {
                return Ok(Err((1, format!("is negative ({p}); a population is 0 or more"))))
            }
            _ => {
                return Ok(Err(match cell_at(arrays[1], row)? {
                    Cell::Missing => (1, "is missing".to_string()),
                    cell => (1, format!("is not a finite number ({})", super::validate::cell_text(&cell))),
                }))
            }
        };
        if population == 0.0 && events > 0.0 {
            return Ok(Err((
                1,
                format!("is 0 on a row with {events} events: events need a population at risk"),
            )));
        }
        Ok(Ok((events, population)))
    }
}

/// Each stratum's reference rate, keyed by the strata values' bytes.
pub struct ReferenceRates {
    rates: HashMap<Vec<u8>, usize>,
    report: StandardisationReport,
    /// The strata met in the input, numbered (so a row of a Parquet
    /// dictionary column costs an array access), and each one's rate.
    met: RefCell<(SegmentIndex, Vec<Option<f64>>)>,
}

/// The text of a stratum for messages: `age_band = '85+', sex = 'f'`.
pub fn describe_stratum(columns: &[String], values: &[Option<String>]) -> String {
    let value = |v: &Option<String>| v.as_deref().map_or("(missing)".to_string(), |v| format!("'{v}'"));
    columns.iter().zip(values).map(|(c, v)| format!("{c} = {}", value(v))).collect::<Vec<_>>().join(", ")
}

impl ReferenceRates {
    /// The rates of the run's standard: read from its file; in a `score`
    /// whose saved prior was fitted to standardised counts, that fit's rates
    /// (so the scored areas are measured by the same yardstick); else pooled
    /// from the input (one reading, before the areas are summed).
    pub fn of(job: &Job, standard: &Standardisation) -> Result<Self> {
        let saved = match &job.prior {
            PriorSource::Saved { path, summary } => {
                summary.standardisation.as_ref().map(|saved| (saved, path))
            }
            PriorSource::Fit => None,
        };
        match (&standard.reference, saved) {
            (Some(path), _) => Self::external(job, standard, path),
            (None, Some((saved, path))) => Self::saved(standard, saved, path),
            (None, None) => Self::internal(job, standard),
        }
    }

    fn saved(standard: &Standardisation, saved: &StandardisationReport, path: &Path) -> Result<Self> {
        if saved.strata != standard.strata {
            return Err(Error::Usage(format!(
                "the saved prior's expected counts were made over the strata {}, not {}: give the same --strata, or --reference-rates",
                saved.strata.join(", "),
                standard.strata.join(", ")
            )));
        }
        let index = saved
            .rates
            .iter()
            .enumerate()
            .map(|(at, rate)| (key_bytes(&rate.stratum.iter().cloned().map(Some).collect::<Vec<_>>()), at))
            .collect();
        let file = Some(path.display().to_string());
        Ok(ReferenceRates::new(index, report(standard, "saved", file, saved.rates.clone())))
    }

    fn internal(job: &Job, standard: &Standardisation) -> Result<Self> {
        let mut columns =
            vec![(job.columns.count.as_str(), "events"), (standard.population.as_str(), "population")];
        columns.extend(standard.strata.iter().map(|c| (c.as_str(), STRATUM_ROLE)));
        let input = Input::open_source(&job.input, job.delimiter, &columns, super::DEFAULT_BATCH_ROWS)?;
        // The strata met, and each one's (events, population).
        let mut index = SegmentIndex::default();
        let mut sums: Vec<(f64, f64)> = Vec::new();
        input.for_each_batch(|batch| {
            let rows = StratumRows::of(&batch.columns[0], &batch.columns[1])?;
            let strata = SegmentColumns::of(&batch.columns[2..])?;
            for row in 0..batch.rows() {
                // Invalid rows are left out here as in the sums; the summing pass names them.
                let Ok((events, population)) = rows.read([&batch.columns[0], &batch.columns[1]], row)? else {
                    continue;
                };
                if (0..standard.strata.len()).any(|c| strata.is_missing(c, row)) {
                    continue;
                }
                let at = index.number(&strata, row) as usize;
                if at == sums.len() {
                    sums.push((0.0, 0.0));
                }
                sums[at].0 += events;
                sums[at].1 += population;
            }
            Ok(())
        })?;
        let (mut rates, mut by_key) = (Vec::with_capacity(sums.len()), HashMap::new());
        for (at, (events, population)) in sums.into_iter().enumerate() {
            let stratum = index.key(at as u32).clone();
            if events == 0.0 {
                return Err(Error::Input(format!(
                    "{}: the stratum {} has no events in any area, so its pooled reference rate is zero and its rows could add nothing to any expected count; merge it with a neighbouring stratum, or give its rate in --reference-rates",
                    job.input.display(),
                    describe_stratum(&standard.strata, &stratum)
                )));
            }
            by_key.insert(key_bytes(&stratum), at);
            rates.push(StratumRate {
                stratum: stratum.into_iter().map(Option::unwrap_or_default).collect(),
                rate: events / population,
                events: Some(events),
                population: Some(population),
            });
        }
        Ok(ReferenceRates::new(by_key, report(standard, "internal", None, rates)))
    }

    fn external(job: &Job, standard: &Standardisation, path: &Path) -> Result<Self> {
        let mut columns: Vec<(&str, &str)> =
            standard.strata.iter().map(|c| (c.as_str(), STRATUM_ROLE)).collect();
        columns.push(("rate", "reference rate"));
        let input = Input::open(path, job.delimiter, &columns, super::DEFAULT_BATCH_ROWS)?;
        let width = standard.strata.len();
        let (mut index, mut rates, mut first_rows) = (HashMap::new(), Vec::new(), Vec::new());
        input.for_each_batch(|batch| {
            let strata = SegmentColumns::of(&batch.columns[..width])?;
            let values = NumericColumn::of_reals(&batch.columns[width])?;
            for row in 0..batch.rows() {
                let fault = |column: &str, reason: String| {
                    Rejection { row, column: column.to_string(), reason }.stopping(&batch)
                };
                if let Some(c) = (0..width).find(|&c| strata.is_missing(c, row)) {
                    return Err(fault(&standard.strata[c], "is missing".to_string()));
                }
                let rate = match values.number(row) {
                    Some(rate) if rate >= 0.0 => rate,
                    _ => {
                        let cell = cell_at(&batch.columns[width], row)?;
                        let reason =
                            format!("is not a rate of 0 or more ({})", super::validate::cell_text(&cell));
                        return Err(fault("rate", reason));
                    }
                };
                let stratum = strata.key(row);
                let key = key_bytes(&stratum);
                if let Some(&first) = index.get(&key) {
                    let reason = format!(
                        "repeats the stratum {} of row {}; each stratum has one reference rate",
                        describe_stratum(&standard.strata, &stratum),
                        first_rows[first] + 1
                    );
                    return Err(fault(&standard.strata[0], reason));
                }
                index.insert(key, rates.len());
                first_rows.push(batch.first_row_in_file + row);
                let stratum = stratum.into_iter().map(Option::unwrap_or_default).collect();
                rates.push(StratumRate { stratum, rate, events: None, population: None });
            }
            Ok(())
        })?;
        if rates.is_empty() {
            return Err(Error::Input(format!("{}: the reference rates table has no rows", path.display())));
        }
        let file = Some(path.display().to_string());
        Ok(ReferenceRates::new(index, report(standard, "external", file, rates)))
    }

    fn new(rates: HashMap<Vec<u8>, usize>, report: StandardisationReport) -> Self {
        ReferenceRates { rates, report, met: RefCell::new((SegmentIndex::default(), Vec::new())) }
    }

    /// The reference rate of the stratum of `row` (every strata value
    /// present), None when the standard has none.
    pub fn rate_of_row(&self, strata: &SegmentColumns, row: usize) -> Option<f64> {
        let mut met = self.met.borrow_mut();
        let (index, rates) = &mut *met;
        let number = index.number(strata, row) as usize;
        if number == rates.len() {
            let key = key_bytes(index.key(number as u32));
            rates.push(self.rates.get(&key).map(|&at| self.report.rates[at].rate));
        }
        rates[number]
    }

    /// The standard and its rates, for the summary.
    pub fn report(&self) -> &StandardisationReport {
        &self.report
    }
}

/// A stratum's values as one key: per value its length and bytes, so no two
/// strata share a key (integers are keyed by their digits, as text).
fn key_bytes(stratum: &[Option<String>]) -> Vec<u8> {
    let mut key = Vec::new();
    for value in stratum {
        let bytes = value.as_deref().unwrap_or_default().as_bytes();
        key.extend_from_slice(&(bytes.len() as u64).to_le_bytes());
        key.extend_from_slice(bytes);
    }
    key
}

fn report(
    standard: &Standardisation,
    kind: &str,
    reference_file: Option<String>,
    rates: Vec<StratumRate>,
) -> StandardisationReport {
    StandardisationReport {
        standard: kind.to_string(),
        reference_file,
        population: standard.population.clone(),
        strata: standard.strata.clone(),
        rates,
    }
}
