//! ratepool: empirical-Bayes shrinkage of rates over many groups.
//!
//! One prior is fitted to all groups by maximum marginal likelihood, a Beta
//! prior for proportions (beta-binomial), a Gamma prior for event rates with
//! exposure (gamma-Poisson) or a normal prior for estimates with known
//! standard errors (normal-normal), and each group gets its conjugate posterior.
//!
//! Layers, each depending only on those before it:
//! * [`core`]: pure numerics (special functions, models, fit, posteriors).
//! * [`io`]: reading and writing tables (CSV, Parquet through arrow-rs), in batches, atomically.
//! * [`memory`]: free memory handed back to the system between a run's phases.
//! * [`summary`]: the JSON summary's wire types, and its figures in words.
//! * [`pipeline`]: validation, pair aggregation, fit and scoring, end to end.
//! * [`report`]: the terminal text of a summary.
//! * [`view`]: the HTML report of a run, from its output table and summary.
//!
//! ```
//! use ratepool::core::fit::fit;
//! use ratepool::core::model::beta_binomial::BetaBinomial;
//! use ratepool::core::pairs::PairTable;
//!
//! let trials = [20.0, 35.0, 12.0, 50.0, 8.0, 40.0];
//! let successes = [3.0, 20.0, 2.0, 10.0, 7.0, 30.0];
//! let (table, _) = PairTable::from_groups(&trials, &successes);
//! let result = fit::<BetaBinomial>(&table).expect("these groups are overdispersed");
//! assert!(result.mean > 0.3 && result.mean < 0.7);
//! ```
#![deny(missing_docs)]

pub mod cli;
pub mod config;
pub mod core;
pub mod error;
pub mod io;
pub mod memory;
pub mod pipeline;
pub mod progress;
pub mod report;
pub mod summary;
pub mod view;
