//! The pure numerical core: special functions, distributions, the three
//! models (each with a free variant on a grid), the fit (with covariates or without), the bootstrap of a fitted prior and the posterior
//! summaries. Nothing here reads or writes files.

pub mod bootstrap;
pub mod contiguity;
pub mod dense;
pub mod diagnostics;
pub mod fit;
pub mod incomplete;
pub mod model;
pub mod pairs;
pub mod quantile;
pub mod ranking;
pub mod regression;
pub mod special;
pub mod temme;
