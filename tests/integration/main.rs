//! Integration tests, one binary grouped by theme: reference values from
//! libraries outside the project, end-to-end fits against them, facts of the
//! trade, and the command line's contract (exit codes, errors, files).

mod aggregation;
mod architecture;
mod checks;
mod cli;
mod config;
mod covariates;
mod decisions;
mod edges;
mod facts;
mod faults;
mod fits;
mod free_prior;
mod fuzz_corpus;
mod levels;
mod logs;
mod neighbours;
mod no_overwrite;
mod normal;
mod output;
mod producers;
mod properties;
mod readme;
mod reference;
mod report;
mod scale;
mod segments;
mod standardisation;
mod util;
mod wording;
