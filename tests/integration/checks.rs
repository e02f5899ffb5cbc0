//! Does the model fit? The calibration check calls a bimodal input a poor
//! fit and well-specified inputs good ones at its stated false-alarm rate
//! (p < 0.001), and `score` checks the scored data, not the fitted data.

use crate::util::{ratepool, stderr, summary, write};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Beta, Binomial, Distribution};
use std::path::Path;

/// Invented groups: trials from a fixed list, rates from `rate`.
fn groups(seed: u64, count: usize, mut rate: impl FnMut(usize, &mut ChaCha8Rng) -> f64) -> String {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut text = String::from("id,k,n\n");
    for i in 0..count {
        let n = [3u64, 10, 25, 60, 150][rng.random_range(0..5)];
        let p = rate(i, &mut rng);
        let k = Binomial::new(n, p).unwrap().sample(&mut rng);
        text.push_str(&format!("g{i},{k},{n}\n"));
    }
    text
}

/// Fits `input` in `dir` and returns the summary.
fn fit(dir: &Path, input: &str, extra: &[&str]) -> (serde_json::Value, String) {
    let mut args = vec!["fit", "--model", "beta-binomial", "--input", input, "--group", "id"];
    args.extend(["--successes", "k", "--trials", "n", "--output", "out.csv", "--summary", "s.json"]);
    args.extend(extra);
    let out = ratepool(dir, &args);
    assert!(out.status.success(), "{}", stderr(&out));
    (summary(&dir.join("s.json")), String::from_utf8_lossy(&out.stdout).into_owned() + &stderr(&out))
}

#[test]
fn a_bimodal_input_is_a_poor_fit_and_says_what_to_do() {
    let dir = tempfile::tempdir().unwrap();
    // Half the groups near 0.3, half near 0.7: no one Beta describes them.
    let (low, high) = (Beta::new(60.0, 140.0).unwrap(), Beta::new(140.0, 60.0).unwrap());
    let text = groups(11, 1500, |i, rng| if i % 2 == 0 { low.sample(rng) } else { high.sample(rng) });
    write(dir.path(), "bimodal.csv", &text);
    let (s, printed) = fit(dir.path(), "bimodal.csv", &[]);
    assert_eq!(s["checks"]["verdict"], "poor fit");
    assert!(s["checks"]["calibration"]["p_value"].as_f64().unwrap() < 1e-3);
    assert!(printed.contains("fit per segment with --by"), "{printed}");
    assert!(printed.contains("--prior-shape free"), "the remedy without a column: {printed}");
    assert!(s["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .any(|w| w.as_str().unwrap().contains("does not describe")));
}

#[test]
fn each_segment_is_checked_under_its_own_prior() {
    // Segment "mixed" holds the bimodal rates, segment "plain" rates from one Beta.
    let dir = tempfile::tempdir().unwrap();
    let (low, high) = (Beta::new(60.0, 140.0).unwrap(), Beta::new(140.0, 60.0).unwrap());
    let plain = Beta::new(3.0, 12.0).unwrap();
    let mixed = groups(21, 1500, |i, rng| if i % 2 == 0 { low.sample(rng) } else { high.sample(rng) });
    let single = groups(22, 1500, |_, rng| plain.sample(rng));
    let mut text = String::from("id,k,n,kind\n");
    for (kind, rows) in [("mixed", &mixed), ("plain", &single)] {
        for line in rows.lines().skip(1) {
            text.push_str(&format!("{kind}-{line},{kind}\n"));
        }
    }
    write(dir.path(), "segments.csv", &text);
    let (s, printed) = fit(dir.path(), "segments.csv", &["--by", "kind"]);
    let verdicts: Vec<(&str, &str)> = s["segments"]
        .as_array()
        .unwrap()
        .iter()
        .map(|seg| (seg["key"]["kind"].as_str().unwrap(), seg["checks"]["verdict"].as_str().unwrap()))
        .collect();
    assert!(verdicts.contains(&("mixed", "poor fit")), "{verdicts:?}");
    assert!(verdicts.contains(&("plain", "fits")), "{verdicts:?}");
    for seg in s["segments"].as_array().unwrap() {
        assert_eq!(seg["checks"]["calibration"]["groups"], 1500);
    }
    assert!(printed.contains("1 of 2 segments"), "{printed}");
}

#[test]
fn well_specified_inputs_pass_at_the_stated_false_alarm_rate() {
    // 40 inputs drawn from the beta-binomial model itself: at p < 0.001 the
    // chance of two or more alarms is below 0.001 (binomial, 40 trials).
    let dir = tempfile::tempdir().unwrap();
    let prior = Beta::new(3.0, 12.0).unwrap();
    let mut alarms = 0;
    for seed in 0..40 {
        write(dir.path(), "good.csv", &groups(100 + seed, 600, |_, rng| prior.sample(rng)));
        let (s, _) = fit(dir.path(), "good.csv", &[]);
        let checks = &s["checks"];
        assert_eq!(checks["calibration"]["groups"], 600);
        let bins: u64 =
            checks["calibration"]["bins"].as_array().unwrap().iter().map(|b| b.as_u64().unwrap()).sum();
        assert_eq!(bins, 600);
        alarms += usize::from(checks["verdict"] == "poor fit");
    }
    assert!(alarms <= 1, "{alarms} false alarms in 40");
}

#[test]
fn score_checks_the_scored_data_under_the_saved_prior() {
    let dir = tempfile::tempdir().unwrap();
    let prior = Beta::new(3.0, 12.0).unwrap();
    write(dir.path(), "old.csv", &groups(7, 800, |_, rng| prior.sample(rng)));
    let (fitted, _) = fit(dir.path(), "old.csv", &[]);
    std::fs::copy(dir.path().join("s.json"), dir.path().join("prior.json")).unwrap();
    assert_eq!(fitted["checks"]["data"], "the fitted data");
    // New data whose rates have moved: the saved prior has gone stale.
    let moved = Beta::new(12.0, 6.0).unwrap();
    write(dir.path(), "new.csv", &groups(8, 800, |_, rng| moved.sample(rng)));
    let args = ["score", "--prior", "prior.json", "--input", "new.csv", "--group", "id", "--successes", "k"];
    let mut args = args.to_vec();
    args.extend(["--trials", "n", "--output", "scored.csv", "--summary", "scored.json"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let scored = summary(&dir.path().join("scored.json"));
    let checks = &scored["checks"];
    assert_eq!(checks["data"], "the scored data under the saved prior");
    assert_eq!(checks["verdict"], "poor fit");
    // The fit figures are the saved prior's own, kept as such; the scored
    // data's likelihood under that prior is far lower per group.
    assert_eq!(scored["fit"]["log_marginal_likelihood"], fitted["fit"]["log_marginal_likelihood"]);
    let per_group =
        |s: &serde_json::Value| s["checks"]["log_marginal_likelihood_per_group"].as_f64().unwrap();
    assert!(
        per_group(&scored) < per_group(&fitted) - 0.5,
        "{} vs {}",
        per_group(&scored),
        per_group(&fitted)
    );
    assert!(String::from_utf8_lossy(&out.stdout).contains("prior fit    (saved in prior.json"));
}

#[test]
fn quiet_prints_nothing_but_keeps_the_warnings_in_the_summary() {
    let dir = tempfile::tempdir().unwrap();
    let (low, high) = (Beta::new(60.0, 140.0).unwrap(), Beta::new(140.0, 60.0).unwrap());
    write(
        dir.path(),
        "bimodal.csv",
        &groups(12, 800, |i, rng| if i % 2 == 0 { low.sample(rng) } else { high.sample(rng) }),
    );
    let args = ["--quiet", "fit", "--model", "beta-binomial", "--input", "bimodal.csv", "--group", "id"];
    let mut args = args.to_vec();
    args.extend(["--successes", "k", "--trials", "n", "--output", "out.csv", "--summary", "s.json"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success());
    assert!(out.stdout.is_empty() && out.stderr.is_empty(), "{}", stderr(&out));
    let s = summary(&dir.path().join("s.json"));
    assert!(!s["warnings"].as_array().unwrap().is_empty(), "the warning is kept in the summary");
}
