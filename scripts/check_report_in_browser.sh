#!/usr/bin/env bash
# Checks the HTML report in a real browser on a clean machine: installs
# Debian's chromium (when missing) and playwright-core (pinned in
# scripts/browser/package-lock.json), writes reports of the demo data (a plain
# fit with flags and ranks, the normal model, a segmented fit through
# `ratepool report`, a free prior, the demo districts with the neighbour prior
# and their map, and the demo shops' star ratings by category), opens each
# headless, screenshots every plot into SCREENSHOTS (default
# target/report-check), and fails when a plot is missing or empty or the page
# logs an error.
#
# usage: bash scripts/check_report_in_browser.sh [SCREENSHOTS]
set -euo pipefail
cd "$(dirname "$0")/.."
shots="${1:-target/report-check}"
if ! command -v chromium >/dev/null; then
  apt-get update -qq && apt-get install -y -qq chromium >/dev/null
fi
(cd scripts/browser && npm ci --no-audit --no-fund --silent)
cargo build --quiet --locked
bin="${CARGO_TARGET_DIR:-target}/debug/ratepool"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
"$bin" --quiet fit --input demo-data/districts.csv --model gamma-poisson --group district_id \
  --events observed_cases --exposure expected_cases --above 1 --flag-fdr 0.1 --ranks \
  --output "$work/districts.parquet" --summary "$work/districts.json" --report "$work/districts.html"
"$bin" --quiet fit --input demo-data/clinic_waits.csv --model normal-normal --group clinic_id \
  --estimate mean_wait_minutes --std-error wait_se --above 30 --flag-fdr 0.1 --rank-lowest-first \
  --output "$work/clinics.csv" --summary "$work/clinics.json" --report "$work/clinics.html"
"$bin" --quiet fit --input demo-data/returns.csv --model beta-binomial --group store_id --outcome returned \
  --by store_kind --ranks --output "$work/returns.parquet" --summary "$work/returns.json"
"$bin" report --table "$work/returns.parquet" --summary "$work/returns.json" --output "$work/returns.html"
"$bin" --quiet fit --input demo-data/storefronts.csv --model beta-binomial --group storefront_id \
  --successes purchases --trials visits --prior-shape free --below 0.02 --flag-fdr 0.05 \
  --output "$work/storefronts.csv" --summary "$work/storefronts.json" --report "$work/storefronts.html"
"$bin" neighbours --map demo-data/district_map.geojson --key district_id --output "$work/district_neighbours.csv"
"$bin" --quiet fit --input demo-data/district_bands.csv --model gamma-poisson --group district_id --events cases \
  --population population --strata age_band --neighbours "$work/district_neighbours.csv" --above 1.2 --flag-fdr 0.1 \
  --output "$work/bands.csv" --summary "$work/bands.json" --report "$work/bands.html" \
  --map demo-data/district_map.geojson --map-key district_id
"$bin" --quiet fit --input demo-data/star_shops.csv --model dirichlet-multinomial --group shop_id \
  --level-counts stars_1,stars_2,stars_3,stars_4,stars_5 --by category --above 4.5 --flag-fdr 0.1 --ranks \
  --output "$work/star_shops.parquet" --summary "$work/star_shops.json" --report "$work/star_shops.html"
node scripts/browser/check_report.mjs "$shots" "$work/districts.html" "$work/clinics.html" "$work/returns.html" \
  "$work/storefronts.html" "$work/bands.html" "$work/star_shops.html"
