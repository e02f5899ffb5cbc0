//! How ratepool talks to a first-time user: names that say what a column
//! holds, help that fits the screen, numbers written for people, and a
//! clear answer to each ordinary mistake (exit code and words).

use crate::util::{ratepool, stderr, summary, write, Csv, CLINICS};
use std::path::Path;

fn demo(name: &str) -> String {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data").join(name).to_str().unwrap().to_string()
}

/// `ratepool fit` of a demo file with its model and columns, then `extra`.
fn demo_fit(dir: &Path, file: &str, model: &[&str], extra: &[&str]) -> std::process::Output {
    let input = demo(file);
    ratepool(dir, &[&["fit", "--input", &input], model, extra].concat())
}

const MARKETPLACE: [&str; 8] = [
    "--model",
    "beta-binomial",
    "--group",
    "seller_id",
    "--successes",
    "positive_ratings",
    "--trials",
    "total_ratings",
];
const DISTRICTS: [&str; 8] = [
    "--model",
    "gamma-poisson",
    "--group",
    "district_id",
    "--events",
    "observed_cases",
    "--exposure",
    "expected_cases",
];

fn marketplace_fit(dir: &Path, extra: &[&str]) -> std::process::Output {
    demo_fit(dir, "marketplace.csv", &MARKETPLACE, extra)
}

fn districts_fit(dir: &Path, extra: &[&str]) -> std::process::Output {
    demo_fit(dir, "districts.csv", &DISTRICTS, extra)
}

fn clinics_fit(dir: &Path, extra: &[&str]) -> std::process::Output {
    demo_fit(dir, "clinic_waits.csv", &CLINICS, extra)
}

#[test]
fn each_model_names_its_raw_value_and_posterior_parameters_in_its_own_words() {
    let dir = tempfile::tempdir().unwrap();
    let out = marketplace_fit(dir.path(), &["--quiet", "--output", "m.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let header = Csv::read(&dir.path().join("m.csv")).header;
    for name in ["raw_proportion", "posterior_mean", "posterior_param_alpha", "posterior_param_beta"] {
        assert!(header.iter().any(|h| h == name), "{name} in {header:?}");
    }
    let out = districts_fit(dir.path(), &["--quiet", "--output", "d.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let header = Csv::read(&dir.path().join("d.csv")).header;
    for name in ["raw_rate", "posterior_mean", "posterior_param_shape", "posterior_param_inverse_scale"] {
        assert!(header.iter().any(|h| h == name), "{name} in {header:?}");
    }
    // No column of a gamma-Poisson run may read as a smoothed rate but the posterior mean.
    assert!(!header.iter().any(|h| h == "posterior_rate"), "{header:?}");
    let out = clinics_fit(dir.path(), &["--quiet", "--output", "c.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let header = Csv::read(&dir.path().join("c.csv")).header;
    for name in ["raw_estimate", "posterior_param_mean", "posterior_param_variance"] {
        assert!(header.iter().any(|h| h == name), "{name} in {header:?}");
    }
    assert!(!header.iter().any(|h| h.contains("rate")), "a waiting time is not a rate: {header:?}");
}

#[test]
fn the_summary_says_prior_and_its_version_and_one_order_for_ranks_and_top() {
    let dir = tempfile::tempdir().unwrap();
    let extra = ["--quiet", "--above", "1", "--flag-fdr", "0.1", "--top", "5", "--top-method", "threshold"];
    let extra = [&extra[..], &["--rank-lowest-first"]].concat();
    let mut args = extra.to_vec();
    args.extend(["--output", "d.csv", "--summary", "d.json"]);
    let out = districts_fit(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let s = summary(&dir.path().join("d.json"));
    assert_eq!(s["format_version"], 2);
    assert!(s["prior"]["shape"].as_f64().unwrap() > 0.0);
    assert!(s.get("hyperprior").is_none());
    assert_eq!(s["flags"]["fdr_level"], 0.1);
    assert!(s["flags"].get("bound").is_none());
    assert_eq!(s["rank_order"], "lowest-first");
    assert!(s["top"].get("best").is_none(), "the order is said once, in rank_order");
}

#[test]
fn a_summary_written_with_the_old_keys_is_read_back_by_score() {
    let dir = tempfile::tempdir().unwrap();
    let extra =
        ["--quiet", "--above", "1", "--flag-fdr", "0.1", "--output", "d.csv", "--summary", "new.json"];
    let out = districts_fit(dir.path(), &extra);
    assert!(out.status.success(), "{}", stderr(&out));
    // Version 1 of the layout: no format_version, the prior under `hyperprior`, Q under `flags.bound`.
    let mut old = summary(&dir.path().join("new.json"));
    let object = old.as_object_mut().unwrap();
    object.remove("format_version");
    let prior = object.remove("prior").unwrap();
    object.insert("hyperprior".into(), prior);
    let flags = object["flags"].as_object_mut().unwrap();
    let level = flags.remove("fdr_level").unwrap();
    flags.insert("bound".into(), level);
    write(dir.path(), "old.json", &old.to_string());
    let input = demo("districts.csv");
    for (prior, output) in [("new.json", "from_new.csv"), ("old.json", "from_old.csv")] {
        let args = [
            "score",
            "--quiet",
            "--prior",
            prior,
            "--input",
            &input,
            "--group",
            "district_id",
            "--events",
            "observed_cases",
            "--exposure",
            "expected_cases",
            "--above",
            "1",
            "--output",
            output,
        ];
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{prior}: {}", stderr(&out));
    }
    let (new, old) = (dir.path().join("from_new.csv"), dir.path().join("from_old.csv"));
    assert_eq!(std::fs::read(new).unwrap(), std::fs::read(old).unwrap());
}

/// `ratepool ARGS` with the terminal 80 columns wide; stdout as text.
fn help_at_80(args: &[&str]) -> String {
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_ratepool"))
        .args(args)
        .env("COLUMNS", "80")
        .output()
        .expect("binary runs");
    assert!(out.status.success(), "{args:?}: {}", stderr(&out));
    String::from_utf8(out.stdout).unwrap()
}

const SUBCOMMANDS: [&str; 8] =
    ["", "fit", "score", "report", "neighbours", "check-config", "completions", "manpage"];

#[test]
fn help_fits_80_columns_and_short_help_gives_each_option_one_line() {
    for sub in SUBCOMMANDS {
        let args: Vec<&str> = [sub].into_iter().filter(|s| !s.is_empty()).collect();
        for flag in ["-h", "--help"] {
            let help = help_at_80(&[&args[..], &[flag]].concat());
            for line in help.lines() {
                assert!(line.chars().count() <= 80, "{sub} {flag}: {} columns: {line}", line.chars().count());
            }
        }
        let short = help_at_80(&[&args[..], &["-h"]].concat());
        let lines: Vec<&str> = short.lines().collect();
        let mut options = 0;
        for (i, line) in lines.iter().enumerate() {
            if !line.trim_start().starts_with('-') {
                continue;
            }
            options += 1;
            // The line after an option is another option, a blank line or a heading: never its help wrapped.
            let next = lines.get(i + 1).copied().unwrap_or("");
            let continues = next.starts_with("   ") && !next.trim_start().starts_with('-');
            assert!(!continues, "{sub} -h: the help of `{}` takes two lines", line.trim());
        }
        assert!(options >= 1, "{sub}: no option found in\n{short}");
    }
}

#[test]
fn long_help_and_the_manual_page_give_the_exit_status_and_the_examples() {
    for sub in ["", "fit", "score", "report", "neighbours", "check-config"] {
        let args: Vec<&str> = [sub, "--help"].into_iter().filter(|s| !s.is_empty()).collect();
        let help = help_at_80(&args);
        assert!(help.contains("Exit status:"), "{sub}");
        for code in
            ["0  the run finished", "2  a usage mistake or invalid input", "3  the model cannot be fitted"]
        {
            assert!(help.contains(code), "{sub}: {code}");
        }
    }
    assert!(!help_at_80(&["fit", "-h"]).contains("Examples"), "-h stays short");
    let page = help_at_80(&["manpage"]);
    assert!(page.contains(".SH \"EXIT STATUS\""), "the manual page's exit status");
    assert!(
        page.contains(".SH EXAMPLES")
            && page.contains("ratepool fit \\-\\-input demo\\-data/marketplace.csv")
    );
    assert!(page.contains("ratepool check\\-config demo\\-data/jobs/weekly\\-fit.toml"));
}

#[test]
fn placeholders_say_what_kind_of_value_and_the_model_comes_first() {
    let kinds = [
        "COLUMN",
        "COLUMN[,COLUMN...]",
        "SCORE[,SCORE...]",
        "COLUMN=P",
        "VALUE[,VALUE...]",
        "FILE",
        "FOLDER",
        "T",
        "Q",
        "K",
        "N",
        "P",
        "CHAR",
        "MODEL",
        "METHOD",
        "SHAPE",
    ];
    let kinds = [&kinds[..], &["ACTION", "FORMAT", "SHELL", "COMMAND", "PROPERTY"]].concat();
    for sub in SUBCOMMANDS {
        let args: Vec<&str> = [sub, "--help"].into_iter().filter(|s| !s.is_empty()).collect();
        let help = help_at_80(&args);
        for placeholder in help.split('<').skip(1).filter_map(|rest| rest.split_once('>').map(|(p, _)| p)) {
            assert!(kinds.contains(&placeholder), "{sub}: <{placeholder}>");
        }
    }
    for sub in ["fit", "score"] {
        let help = help_at_80(&[sub, "-h"]);
        let model = &help[help.find("\nModel:\n").unwrap_or_else(|| panic!("{sub}: no Model heading"))..];
        let first = model.lines().nth(2).unwrap().trim_start();
        assert!(first.starts_with("--model <MODEL>"), "{sub}: the model options begin with {first}");
    }
}

#[test]
fn score_help_speaks_of_scoring_and_refuses_what_only_a_fit_does() {
    let help = help_at_80(&["score", "--help"]);
    for absent in ["--pair-counts", "--min-groups", "Fit one prior per segment", "--variance-method"] {
        assert!(!help.contains(absent), "score --help mentions {absent}");
    }
    let words = help.split_whitespace().collect::<Vec<_>>().join(" ");
    assert!(
        words.contains("Score each segment (the rows sharing the values of these columns) with its prior")
    );
    let dir = tempfile::tempdir().unwrap();
    let out = districts_fit(dir.path(), &["--quiet", "--output", "d.csv", "--summary", "d.json"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let input = demo("districts.csv");
    let args = [
        "score",
        "--prior",
        "d.json",
        "--input",
        &input,
        "--group",
        "district_id",
        "--events",
        "observed_cases",
        "--exposure",
        "expected_cases",
        "--min-groups",
        "5",
        "--output",
        "s.csv",
    ];
    let out = ratepool(dir.path(), &args);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("--min-groups applies when fitting"), "{}", stderr(&out));
    assert!(!dir.path().join("s.csv").exists());
}

#[test]
fn run_options_are_listed_only_where_they_act() {
    for sub in ["completions", "manpage", "check-config"] {
        let help = help_at_80(&[sub, "--help"]);
        for option in ["--threads", "--quiet", "--timings", "--progress", "--log-format"] {
            assert!(!help.contains(option), "{sub} --help lists {option}");
        }
    }
    for sub in ["", "fit", "score", "report"] {
        let args: Vec<&str> = [sub, "--help"].into_iter().filter(|s| !s.is_empty()).collect();
        assert!(help_at_80(&args).contains("--log-format <FORMAT>"), "{sub}");
    }
    // Before the subcommand or after it, the same run.
    let dir = tempfile::tempdir().unwrap();
    let before = ratepool(dir.path(), &["--quiet", "check-config", "/nonexistent.toml"]);
    assert_eq!(before.status.code(), Some(2));
    let input = demo("marketplace.csv");
    let tail = ["--input", &input, "--model", "beta-binomial", "--group", "seller_id", "--successes"];
    let tail = [&tail[..], &["positive_ratings", "--trials", "total_ratings", "--output", "m.csv"]].concat();
    let after = ratepool(dir.path(), &[&["fit"], &tail[..], &["--quiet"]].concat());
    assert!(after.status.success() && after.stdout.is_empty() && after.stderr.is_empty());
}

/// Runs `args` in `dir`, expects exit 2 with every one of `words` on
/// stderr (after the one error prefix), and returns stderr.
fn refused(dir: &Path, args: &[&str], words: &[&str]) -> String {
    let out = ratepool(dir, args);
    let text = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{args:?}: {text}");
    assert!(text.starts_with("ratepool: error: "), "{text}");
    for word in words {
        assert!(text.contains(word), "{args:?}: wanted `{word}` in {text}");
    }
    text
}

#[test]
fn ordinary_mistakes_get_a_clear_answer() {
    let dir = tempfile::tempdir().unwrap();
    let (districts, marketplace) = (demo("districts.csv"), demo("marketplace.csv"));
    // A fit of the demo districts as the gamma-Poisson model, then `extra`.
    let fit_districts =
        |extra: &[&'static str]| [&["fit", "--input", districts.as_str()][..], &DISTRICTS, extra].concat();
    let out = districts_fit(dir.path(), &["--quiet", "--output", "d.csv", "--summary", "d.json"]);
    assert!(out.status.success(), "{}", stderr(&out));
    // A prior file of another model.
    let score = [
        &["score", "--prior", "d.json", "--input", marketplace.as_str()][..],
        &MARKETPLACE[2..],
        &["--output", "s.csv"],
    ]
    .concat();
    refused(
        dir.path(),
        &score,
        &["d.json: the prior file holds a gamma-poisson prior and this run asks for a beta-binomial one"],
    );
    // An output folder that does not exist: the folder named, no temporary file; exit 1 as any unwritable output.
    let out = ratepool(dir.path(), &fit_districts(&["--output", "missing/d.csv"]));
    let text = stderr(&out);
    assert_eq!(out.status.code(), Some(1), "{text}");
    assert!(
        text.starts_with("ratepool: error: --output missing/d.csv: the folder missing does not exist"),
        "{text}"
    );
    assert!(!text.contains(".partial") && !text.contains(".ratepool-"), "{text}");
    // A level given in percent.
    refused(
        dir.path(),
        &fit_districts(&["--output", "x.csv", "--level", "95"]),
        &["--level must be strictly between 0 and 1, got 95; did you mean 0.95?"],
    );
    // Expected counts taken for trials.
    refused(dir.path(), &["fit", "--input", &districts, "--model", "beta-binomial", "--group", "district_id",
        "--successes", "observed_cases", "--trials", "expected_cases", "--output", "x.csv"],
        &["row 1, column 'expected_cases'", "is not a whole number",
          "use the gamma-poisson model: --model gamma-poisson --events observed_cases --exposure expected_cases"]);
    // K at least the number of groups.
    let text = refused(
        dir.path(),
        &fit_districts(&["--top", "3000", "--output", "top.csv"]),
        &["--top 3000 asks for the top 3000 of 3000 groups", "give K below 3000"],
    );
    assert!(!dir.path().join("top.csv").exists(), "{text}");
    // Segments asked of a prior fitted without them.
    let rows: String =
        (0..40).map(|i| format!("g{i},{},{},{}\n", i % 7, 5 + i % 3, ["n", "s"][i % 2])).collect();
    write(dir.path(), "areas.csv", &format!("id,cases,expected,region\n{rows}"));
    let columns = ["--input", "areas.csv", "--group", "id", "--events", "cases", "--exposure", "expected"];
    let fit =
        [&["fit", "--quiet", "--model", "gamma-poisson"], &columns[..], &["--summary", "a.json"]].concat();
    let out = ratepool(dir.path(), &[&fit[..], &["--output", "a.csv"]].concat());
    assert!(out.status.success(), "{}", stderr(&out));
    let score =
        [&["score", "--prior", "a.json"], &columns[..], &["--by", "region", "--output", "s.csv"]].concat();
    refused(dir.path(), &score, &["a.json: the prior was fitted without segments", "score without --by"]);
    assert!(!dir.path().join("s.csv").exists());
}

#[test]
fn job_file_mistakes_are_named_in_plain_words() {
    let dir = tempfile::tempdir().unwrap();
    let job = "input = \"in.csv\"\nmodel = \"beta-binomial\"\nflag_fdr = 0.1\nlevel = \"high\"\ntop = 2.5\nlevle = 0.9\n";
    write(dir.path(), "job.toml", job);
    let text = refused(dir.path(), &["check-config", "job.toml"], &[
        "line 3, key 'flag_fdr': not an option of `fit`; did you mean `flag-fdr`?",
        "line 4, key 'level': must be a number, such as 0.95 or 1 (without quotes), not the text \"high\"",
        "line 5, key 'top': must be a whole number, such as 20 (without quotes), not 2.5",
        "line 6, key 'levle': not an option of `fit`; did you mean `level`?",
    ]);
    assert!(!text.contains("invalid float literal"), "{text}");
}

#[test]
fn calibration_of_few_groups_gives_no_verdict_and_each_warning_is_shown_once() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "two.csv", "id,k,n\na,1,4\nb,3,9\n");
    let args = ["fit", "--input", "two.csv", "--model", "beta-binomial", "--group", "id", "--successes", "k"];
    let args = [&args[..], &["--trials", "n", "--output", "o.csv", "--summary", "s.json"]].concat();
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let s = summary(&dir.path().join("s.json"));
    assert_eq!(s["checks"]["verdict"], "too few groups to judge (fewer than 50)");
    let (stdout, stderr) = (String::from_utf8_lossy(&out.stdout), stderr(&out));
    assert!(stdout.contains(": too few groups to judge (fewer than 50)"), "{stdout}");
    let warnings = s["warnings"].as_array().unwrap();
    assert!(!warnings.is_empty(), "two groups end at complete pooling, with a warning");
    for warning in warnings {
        let warning = warning.as_str().unwrap();
        let shown = stdout.matches(warning).count() + stderr.matches(warning).count();
        assert_eq!(shown, 1, "shown {shown} times: {warning}");
        assert!(stderr.contains(&format!("ratepool: warning: {warning}")));
    }
}

#[test]
fn p_values_on_the_terminal_are_never_written_as_zero_or_one_in_scientific_form() {
    let dir = tempfile::tempdir().unwrap();
    let out = marketplace_fit(dir.path(), &["--output", "m.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("one-sided p < 1e-300"), "{text}");
    assert!(text.contains(", p = 0.18 over 20000 groups"), "{text}");
    assert!(!text.contains("e0") && !text.contains("e-1 ") && !text.contains("e1,"), "{text}");
    let out = clinics_fit(dir.path(), &["--output", "c.csv"]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("Normal(mean = 24.1819, variance = 25.2488 (se 1.78))"), "{text}");
}

/// The cautions section of a report page.
fn cautions_of(page: &str) -> &str {
    let start = page.find("<section id=\"cautions\">").expect("a cautions section");
    &page[start..]
}

#[test]
fn report_cautions_speak_of_the_run_at_hand_and_of_no_trade() {
    let dir = tempfile::tempdir().unwrap();
    let flagged = ["--quiet", "--above", "1", "--flag-fdr", "0.1", "--ranks", "--output", "d.parquet"];
    let out =
        districts_fit(dir.path(), &[&flagged[..], &["--summary", "d.json", "--report", "d.html"]].concat());
    assert!(out.status.success(), "{}", stderr(&out));
    let plain = ["--quiet", "--output", "m.parquet", "--summary", "m.json", "--report", "m.html"];
    let out = marketplace_fit(dir.path(), &plain);
    assert!(out.status.success(), "{}", stderr(&out));
    let districts = std::fs::read_to_string(dir.path().join("d.html")).unwrap();
    let sellers = std::fs::read_to_string(dir.path().join("m.html")).unwrap();
    for page in [cautions_of(&districts), cautions_of(&sellers)] {
        for trade in ["seller", "livelihood", "disease", "epidemiolog", "platform"] {
            assert!(!page.to_lowercase().contains(trade), "a caution assumes a trade ({trade}): {page}");
        }
        assert!(page.contains("may identify the people behind them"));
    }
    // The districts were ranked and flagged: both cautions, with the run's own figures.
    let districts = cautions_of(&districts);
    assert!(districts.contains("Ranks order groups by their estimated rate"));
    assert!(districts
        .contains("of the 334 groups flagged at a false-discovery rate of 0.1, about 33.37 are expected"));
    // The sellers were neither ranked nor flagged, fit well and are many: none of those cautions.
    let sellers = cautions_of(&sellers);
    for absent in
        ["Ranks order", "A flag is", "poor fit", "calibration check cannot judge", "Plug-in intervals"]
    {
        assert!(!sellers.contains(absent), "{absent}: {sellers}");
    }
    // Few groups: the calibration cannot judge and plug-in intervals run short.
    write(dir.path(), "few.csv", "id,k,n\na,1,4\nb,3,9\nc,0,5\nd,7,10\ne,2,2\nf,5,12\ng,1,8\nh,9,30\n");
    let args = ["--quiet", "fit", "--input", "few.csv", "--model", "beta-binomial", "--group", "id"];
    let args = [&args[..], &["--successes", "k", "--trials", "n", "--output", "f.csv", "--report", "f.html"]]
        .concat();
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let few = std::fs::read_to_string(dir.path().join("f.html")).unwrap();
    let few = cautions_of(&few);
    assert!(few.contains("With 8 groups the calibration check cannot judge"), "{few}");
    assert!(
        few.contains("Plug-in intervals treat the fitted prior as known and run short with 8 groups"),
        "{few}"
    );
}

#[test]
fn plots_fill_the_page_width_and_whole_number_ticks_have_no_decimal_point() {
    let dir = tempfile::tempdir().unwrap();
    let args = ["--quiet", "--output", "d.parquet", "--summary", "d.json", "--report", "d.html"];
    let out = districts_fit(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let page = std::fs::read_to_string(dir.path().join("d.html")).unwrap();
    assert!(page.contains("figure.plot svg{width:100%;height:auto}"), "the plots scale to their column");
    assert!(page.contains("figure.plot{display:inline-block;vertical-align:top;width:calc(50% - 1em)"));
    let labels: Vec<&str> = page
        .split("</text>")
        .filter_map(|before| before.rsplit_once('>').map(|(_, label)| label.trim()))
        .collect();
    assert!(labels.contains(&"50") || labels.contains(&"100"), "count axes are labelled: {labels:?}");
    let with_point: Vec<&&str> =
        labels.iter().filter(|l| l.ends_with(".0") && l[..l.len() - 2].parse::<i64>().is_ok()).collect();
    assert!(with_point.is_empty(), "whole numbers with a decimal point: {with_point:?}");
}
