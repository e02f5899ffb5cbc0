//! Covariates (`--covariates`, `--covariates-log`, `--covariates-levels`):
//! each row's covariate values checked, the cells of groups that share a
//! covariate pattern (keyed as segments are, by the text of their values)
//! turned into the rows of a design (numbers, logs, one indicator per level
//! after the first), the covariate prior fitted to the cells' pairs
//! ([`crate::core::regression`]), and each cell's prior and centre.

use super::segments::{SegmentColumns, SegmentPairs};
use super::{CovariateRole, Job, Likelihood};
use crate::core::incomplete::{erfc, gamma_tails};
use crate::core::model::{Family, Prior, PriorUncertainty};
use crate::core::pairs::WeightedPair;
use crate::core::regression::{
    fit_regression, CellPairs, Design, DesignFault, RegressionBoundary, RegressionFailure, RegressionFit,
};
use crate::error::{Error, Result};
use crate::io::cells::Cell;
use crate::summary::{
    CoefficientReport, CovariatePrior, CovariateReport, FitReport, FittedPrior, SegmentTest,
};
use std::collections::BTreeSet;
use std::ops::Range;

/// The most indicators the levels of all covariates may make: beyond it a
/// column is better a segment of its own (`--by`).
pub const MAX_LEVELS: usize = 200;

/// The fault of a row's covariate values, (column, reason), if any: a
/// missing value; a number that is not finite; for a log, a value that is
/// not a number above zero. Text is a level and passes.
pub(super) fn covariate_fault(job: &Job, columns: &SegmentColumns, row: usize) -> Option<(String, String)> {
    job.covariates.iter().enumerate().find_map(|(j, covariate)| {
        let reason = match (columns.cell(j, row), covariate.role) {
            (Cell::Missing, _) => Some("missing covariate value".to_string()),
            (_, CovariateRole::Levels) | (Cell::Text(_), CovariateRole::AsRead) | (Cell::Integer(_), _) => {
                None
            }
            (Cell::Number(v), _) if !v.is_finite() => Some(format!("{v} is not a finite number")),
            (Cell::Number(_), CovariateRole::AsRead) => None,
            (Cell::Text(t), CovariateRole::Log) => Some(format!("'{t}' is not a number (its log is taken)")),
            (Cell::Number(_), CovariateRole::Log) => None,
        };
        let reason = reason.or_else(|| match (columns.cell(j, row), covariate.role) {
            (Cell::Integer(v), CovariateRole::Log) if v <= 0 => {
                Some(format!("{v} is not above zero (its log is taken)"))
            }
            (Cell::Number(v), CovariateRole::Log) if v <= 0.0 => {
                Some(format!("{v} is not above zero (its log is taken)"))
            }
            _ => None,
        });
        reason.map(|reason| (covariate.name.clone(), reason))
    })
}

/// A value read as a number, if it is one.
fn number(text: &str) -> Option<f64> {
    match crate::io::cells::parse_text(text) {
        Cell::Integer(v) => Some(v as f64),
        Cell::Number(v) if v.is_finite() => Some(v),
        _ => None,
    }
}

/// One covariate column as it enters: its values per cell, and its report.
struct Entered {
    names: Vec<String>,
    /// Per cell, the values of its design columns.
    values: Vec<Vec<f64>>,
    report: CovariateReport,
}

/// How covariate `j` enters, from its value in every cell.
fn enter(job: &Job, j: usize, cells: &[SegmentPairs]) -> Result<Entered> {
    let covariate = &job.covariates[j];
    let texts: Vec<&str> = cells.iter().map(|c| c.key[j].as_deref().unwrap_or_default()).collect();
    let numbers: Option<Vec<f64>> = match covariate.role {
        CovariateRole::Levels => None,
        _ => texts.iter().map(|t| number(t)).collect(),
    };
    let name = &covariate.name;
    match (covariate.role, numbers) {
        (CovariateRole::Log, Some(numbers)) => Ok(Entered {
            names: vec![format!("log({name})")],
            values: numbers.iter().map(|v| vec![v.ln()]).collect(),
            report: CovariateReport {
                column: name.clone(),
                enters_as: "log".to_string(),
                levels: Vec::new(),
            },
        }),
        (CovariateRole::AsRead, Some(numbers)) => Ok(Entered {
            names: vec![name.clone()],
            values: numbers.iter().map(|&v| vec![v]).collect(),
            report: CovariateReport {
                column: name.clone(),
                enters_as: "number".to_string(),
                levels: Vec::new(),
            },
        }),
        (CovariateRole::Log, None) => {
            Err(Error::Other(format!("the log covariate '{name}' holds a value that is not a number")))
        }
        (CovariateRole::Levels, _) | (CovariateRole::AsRead, None) => {
            let levels: Vec<String> =
                texts.iter().map(|t| t.to_string()).collect::<BTreeSet<_>>().into_iter().collect();
            if levels.len() < 2 {
                return Err(Error::Input(format!(
                    "the covariate '{name}' takes one value ('{}') over every group, so its effect cannot be told from the intercept; leave it out",
                    levels.first().map_or("", String::as_str)
                )));
            }
            if levels.len() > MAX_LEVELS + 1 {
                let example = texts.iter().find(|t| number(t).is_none()).map_or(String::new(), |t| {
                    format!(" (its values are read as levels because '{t}' is not a number)")
                });
                return Err(Error::Input(format!(
                    "the covariate '{name}' has {} levels{example}: more than {MAX_LEVELS} indicators; fit a prior per level with --by {name}, or give a numeric column",
                    levels.len()
                )));
            }
            let values = texts
                .iter()
                .map(|t| levels[1..].iter().map(|level| f64::from(u8::from(level == t))).collect())
                .collect();
            Ok(Entered {
                names: levels[1..].iter().map(|level| format!("{name}={level}")).collect(),
                values,
                report: CovariateReport { column: name.clone(), enters_as: "levels".to_string(), levels },
            })
        }
    }
}

/// The design of the cells (one row per cell, in their order) and how each
/// covariate entered; refuses too many indicators.
pub(super) fn design_of(job: &Job, cells: &[SegmentPairs]) -> Result<(Design, Vec<CovariateReport>)> {
    let entered: Vec<Entered> =
        (0..job.covariates.len()).map(|j| enter(job, j, cells)).collect::<Result<_>>()?;
    let indicators: usize =
        entered.iter().filter(|e| e.report.enters_as == "levels").map(|e| e.names.len()).sum();
    if indicators > MAX_LEVELS {
        return Err(Error::Input(format!(
            "the covariates' levels make {indicators} indicators, more than {MAX_LEVELS}: fit a prior per level of the largest with --by instead"
        )));
    }
    let mut names = vec!["intercept".to_string()];
    names.extend(entered.iter().flat_map(|e| e.names.iter().cloned()));
    let mut rows = Vec::with_capacity(cells.len() * names.len());
    for i in 0..cells.len() {
        rows.push(1.0);
        for e in &entered {
            rows.extend_from_slice(&e.values[i]);
        }
    }
    Ok((Design::new(names, rows), entered.into_iter().map(|e| e.report).collect()))
}

/// A design fault in words, naming the columns.
fn describe_fault(design: &Design, fault: &DesignFault) -> String {
    let names = design.names();
    match fault {
        DesignFault::Constant(k) => format!(
            "the covariate '{}' takes one value over every group, so its effect cannot be told from the intercept; leave it out",
            names[*k]
        ),
        DesignFault::Collinear { column, of } => {
            let others: Vec<&str> = of.iter().map(|&k| names[k].as_str()).collect();
            format!(
                "the covariates are collinear: '{}' is a linear function of {}, so their effects cannot be told apart; leave one out",
                names[*column],
                others.iter().map(|o| format!("'{o}'")).collect::<Vec<_>>().join(", ")
            )
        }
    }
}

/// The covariate prior of a run and each cell's prior under it.
pub(super) struct CellPriors {
    /// Per cell, the prior its groups are scored with.
    pub priors: Vec<Prior>,
    /// Per cell, what is known of that prior's uncertainty.
    pub uncertainties: Vec<PriorUncertainty>,
    /// Per cell, its centre (the prior mean its groups are pulled toward).
    pub centres: Vec<f64>,
    /// The prior's wire form.
    pub fitted_prior: FittedPrior,
    /// How it was fitted.
    pub fit: FitReport,
    /// Boundary warnings.
    pub warnings: Vec<String>,
}

/// The fit without covariates a covariate fit starts from and is tested
/// against: its prior and maximised log likelihood, and its account.
pub(super) struct PlainFit<'a> {
    pub prior: &'a Prior,
    pub log_likelihood: Option<f64>,
    pub fit: &'a FitReport,
}

/// Fits the covariate prior to the cells' pairs (`ranges[i]` cell i's in
/// `pairs`) and gives each cell its prior.
pub(super) fn cell_priors<F: Family>(
    job: &Job,
    cells: &[SegmentPairs],
    (pairs, ranges): (&[WeightedPair], &[Range<usize>]),
    plain: PlainFit<'_>,
    strength_unit: f64,
) -> Result<CellPriors> {
    let (design, entered) = design_of(job, cells)?;
    let cell_pairs = CellPairs { pairs, ranges };
    let groups = cell_pairs.groups();
    design.check(&groups).map_err(|fault| Error::Input(describe_fault(&design, &fault)))?;
    let start = match *plain.prior {
        Prior::Conjugate { natural } => {
            let (mean, strength) = F::mean_strength_of_natural(natural);
            F::working(mean, strength)
        }
        Prior::CompletePooling { mean } => F::working(mean, 1e6 * strength_unit),
    };
    let fitted =
        fit_regression::<F>(&design, cell_pairs, job.likelihood, (start[0], start[1]), strength_unit)
            .map_err(|failure| Error::Fit(describe_failure(&design, failure)))?;
    let priors: Vec<Prior> = (0..cells.len()).map(|i| fitted.prior_of::<F>(&design, i)).collect();
    let uncertainties = (0..cells.len()).map(|i| fitted.uncertainty_of::<F>(&design, i)).collect();
    let centres: Vec<f64> = (0..cells.len()).map(|i| fitted.centre_of::<F>(&design, i)).collect();
    let total: f64 = groups.iter().sum();
    let mean_centre = centres.iter().zip(&groups).map(|(c, g)| c * g).sum::<f64>() / total;
    let terms = &F::TERMS.covariate_terms;
    let held = fitted.boundary == RegressionBoundary::NoOverdispersion;
    let (common, common_se) = terms.common(fitted.common, fitted.common_se());
    let covariate_prior = CovariatePrior {
        link: terms.link.to_string(),
        coefficients: coefficients(&design, &fitted),
        covariates: entered,
        likelihood_ratio_test: likelihood_ratio(job, &design, &fitted, plain.log_likelihood),
    };
    // At the boundary the common parameter is infinite (a variance zero): written as null.
    let common = if held { (None, None) } else { (Some(common), Some(common_se)) };
    let fitted_prior = FittedPrior::with_covariates(&F::TERMS, mean_centre, common, covariate_prior);
    let mut warnings = Vec::new();
    if held {
        warnings.push(
            "the marginal likelihood is maximised at infinite prior strength: beyond what the covariates explain, the groups vary no more than sampling noise, so each group is given its centre (prior_mean; complete pooling to the regression); intervals are those of the centre".to_string(),
        );
    }
    let fit = FitReport {
        source: "fit".to_string(),
        log_marginal_likelihood: fitted.marginal_log_likelihood,
        start_log_marginal_likelihood: plain.fit.log_marginal_likelihood,
        converged: true,
        iterations: fitted.iterations as u64,
        gradient_norm: fitted.gradient_norm,
        boundary: if held { "no-overdispersion" } else { "none" }.to_string(),
        overdispersion_test: plain.fit.overdispersion_test.clone(),
        boundary_score: None,
        likelihood: match job.likelihood {
            Likelihood::Restricted => "restricted",
            Likelihood::Marginal => "marginal",
        }
        .to_string(),
        restricted_log_likelihood: (job.likelihood == Likelihood::Restricted)
            .then_some(fitted.log_likelihood),
        pooling_test: None,
        working_bias: None,
        working_covariance: None,
    };
    Ok(CellPriors { priors, uncertainties, centres, fitted_prior, fit, warnings })
}

/// The coefficient table: estimate, standard error, z and the two-sided p.
fn coefficients(design: &Design, fitted: &RegressionFit) -> Vec<CoefficientReport> {
    design
        .names()
        .iter()
        .enumerate()
        .map(|(k, name)| {
            let (estimate, se) = (fitted.coefficients[k], fitted.coefficient_se(k));
            let z = estimate / se;
            CoefficientReport {
                name: name.clone(),
                estimate,
                se,
                z,
                p: erfc(z.abs() / std::f64::consts::SQRT_2),
            }
        })
        .collect()
}

/// The likelihood-ratio test against the model without covariates, on as
/// many degrees of freedom as coefficients beyond the intercept (Wilks); None
/// under REML or without the plain fit's likelihood.
fn likelihood_ratio(
    job: &Job,
    design: &Design,
    fitted: &RegressionFit,
    plain: Option<f64>,
) -> Option<SegmentTest> {
    if job.likelihood == Likelihood::Restricted {
        return None;
    }
    let degrees = design.width() - 1;
    let statistic = (2.0 * (fitted.marginal_log_likelihood - plain?)).max(0.0);
    Some(SegmentTest {
        name: "likelihood ratio: the prior with covariates against the same model without".to_string(),
        statistic,
        degrees_of_freedom: degrees as u64,
        p_value: gamma_tails(degrees as f64 / 2.0, statistic / 2.0).upper,
    })
}

/// A failed covariate fit in words, naming the coefficient at fault.
fn describe_failure(design: &Design, failure: RegressionFailure) -> String {
    match failure {
        RegressionFailure::Separation { coefficient, towards_positive } => format!(
            "the coefficient of '{}' runs to {} infinity: the groups it marks sit at the edge of the range (all counts zero, or all at their size), so their centre cannot be estimated; merge that level with another, or leave those groups out",
            design.names()[coefficient],
            if towards_positive { "plus" } else { "minus" }
        ),
        RegressionFailure::NoPooling => "the marginal likelihood is maximised at zero prior strength: beyond the covariates the groups share nothing to pool".to_string(),
        RegressionFailure::NotConverged => "Newton's method did not converge for the covariate prior; please report this with the input".to_string(),
    }
}
