//! The fuzzing harness, shared by the fuzz target (`fuzz/fuzz_targets/`) and
//! the regression test that replays `fuzz/seeds/` and `fuzz/regressions/`
//! under `cargo test`: arbitrary bytes as an input table (CSV or Parquet,
//! either model, in batches of 3 rows or the default, failing or skipping bad rows),
//! through reading, validation, the fit and the writers. Whatever the bytes,
//! the run must not panic; a failed run must leave no output and no summary;
//! a successful one must write both, with finite figures.
//!
//! The first byte chooses: bit 0 Parquet, bit 1 gamma-Poisson, bit 2 batches
//! of 3 rows (else the default), bit 3 skip bad rows, bit 4 normal-normal
//! (over bit 1; columns y and e hold estimates and standard errors), bit 5
//! restricted likelihood with it. The rest is the file.

use ratepool::pipeline::validate::ColumnNames;
use ratepool::pipeline::{
    run, FlagEvent, FlagRule, InvalidRows, Job, Layout, Level, Likelihood, Model, PriorSource, RankOrder,
    Thresholds,
};

/// Runs one input through the whole job and checks the contract.
pub fn exercise(data: &[u8]) {
    let Some((&control, content)) = data.split_first() else { return };
    let dir = tempfile::tempdir().expect("scratch folder");
    let parquet = control & 1 == 1;
    let model = match (control & 16 == 16, control & 2 == 2) {
        (true, _) => Model::NormalNormal,
        (false, false) => Model::BetaBinomial,
        (false, true) => Model::GammaPoisson,
    };
    let restricted = model == Model::NormalNormal && control & 32 == 32;
    let input = dir.path().join(if parquet { "in.parquet" } else { "in.csv" });
    std::fs::write(&input, content).expect("input written");
    let output = dir.path().join("out.csv");
    let (count, size) = match model {
        Model::BetaBinomial => ("k", "n"),
        _ => ("y", "e"),
    };
    let batch_rows = if control & 4 == 4 { 3 } else { ratepool::pipeline::DEFAULT_BATCH_ROWS };
    let layout = Layout::Groups { output: output.clone(), batch_rows };
    let invalid = if control & 8 == 8 {
        InvalidRows::Skip { rejects: dir.path().join("rejects.csv") }
    } else {
        InvalidRows::Fail
    };
    let job = Job {
        input: ratepool::pipeline::TableSource::File(input),
        model,
        columns: ColumnNames { group: "id".into(), count: count.into(), size: size.into() },
        layout,
        summary: Some(dir.path().join("s.json")),
        level: Level::new(0.95).expect("valid level"),
        delimiter: b',',
        thresholds: Thresholds { above: Some(0.5), below: Some(0.25) },
        ranks: Some(RankOrder::HighestFirst),
        flag_fdr: Some(FlagRule { event: FlagEvent::Above, bound: 0.1 }),
        segments: Vec::new(),
        min_groups: ratepool::pipeline::DEFAULT_MIN_GROUPS,
        covariates: Vec::new(),
        neighbours: None,
        memory_budget: 1 << 30,
        aggregation: Default::default(),
        top: None,
        seed: ratepool::pipeline::DEFAULT_SEED,
        intervals: Default::default(),
        likelihood: if restricted { Likelihood::Restricted } else { Likelihood::Marginal },
        prior_shape: Default::default(),
        pair_output: None,
        invalid,
        prior: PriorSource::Fit,
    };
    match run(&job, &mut ratepool::pipeline::Unwatched) {
        Ok(summary) => {
            assert!(output.exists() && dir.path().join("s.json").exists());
            assert!(summary.fit.log_marginal_likelihood.is_finite());
            assert!(summary.pull.pool_weight_mean.is_finite());
        }
        Err(_) => {
            assert!(!output.exists(), "a failed run left its output");
            assert!(!dir.path().join("s.json").exists(), "a failed run left its summary");
        }
    }
}
