"""Typed signatures of ratepool (written by python/make_stub.py; do not edit)."""

import os
from typing import Any, Dict, List, Literal, Optional, Sequence, Tuple, Union

from ._engine import Result as Result
from .errors import FitError as FitError
from .errors import InputError as InputError
from .errors import RatepoolError as RatepoolError
from .errors import UsageError as UsageError

Model = Literal['beta-binomial', 'gamma-poisson', 'normal-normal', 'dirichlet-multinomial']

def options(subcommand: str) -> List[Tuple[str, str, str, List[str], str]]: ...

def fit(
    data: Any,
    *,
    model: Optional[Model] = None,  # beta-binomial, gamma-poisson, normal-normal, ...
    config: Optional[Union[str, os.PathLike[str]]] = None,  # A job file (TOML) holding options
    outcome: Optional[str] = None,  # Rows are trials: this column holds 1 or 0
    population: Optional[str] = None,  # Rows are areas by stratum; their population
    strata: Optional[Union[str, Sequence[str]]] = None,  # Columns that make a stratum
    reference_rates: Optional[Union[str, os.PathLike[str]]] = None,  # Rates by stratum of an external standard
    aggregate: Optional[bool] = None,  # Rows are parts of groups: sum them per group first
    on_invalid: Optional[Literal['error', 'skip']] = None,  # On an invalid row: error (stop; default) or skip
    rejects: Optional[Union[str, os.PathLike[str]]] = None,  # Where skipped rows go (.csv or .parquet)
    delimiter: Optional[str] = None,  # CSV field separator, or tab
    memory_budget: Optional[int] = None,  # Memory to stay within, in MB (1024)
    batch_rows: Optional[int] = None,  # Rows per batch read
    group: Optional[str] = None,  # Column holding the group id
    successes: Optional[str] = None,  # Column of successes (beta-binomial)
    trials: Optional[str] = None,  # Column of trials (beta-binomial)
    events: Optional[str] = None,  # Column of events (gamma-poisson)
    exposure: Optional[str] = None,  # Exposure or expected counts (gamma-poisson)
    estimate: Optional[str] = None,  # Column of estimates, one per group (normal-normal)
    std_error: Optional[str] = None,  # Standard errors of the estimates (normal-normal)
    above: Optional[float] = None,  # Add prob_above: P(rate > T)
    below: Optional[float] = None,  # Add prob_below: P(rate < T)
    by: Optional[Union[str, Sequence[str]]] = None,  # Fit one prior per segment of these columns
    min_groups: Optional[int] = None,  # Groups a segment needs for its own prior (30)
    covariates: Optional[Union[str, Sequence[str]]] = None,  # Centre priors on these columns
    covariates_log: Optional[Union[str, Sequence[str]]] = None,  # Covariates entered as their log
    covariates_levels: Optional[Union[str, Sequence[str]]] = None,  # Covariates entered as levels
    flag_fdr: Optional[float] = None,  # Flag at a Bayesian false-discovery rate Q
    ranks: Optional[bool] = None,  # Add rank_mean and rank_conservative
    rank_lowest_first: Optional[bool] = None,  # Rank the lowest rates first (implies --ranks)
    top: Optional[int] = None,  # Add prob_top: P(among the K highest)
    top_method: Optional[Literal['auto', 'draws', 'threshold']] = None,  # prob_top's method: auto, draws or threshold
    top_draws: Optional[int] = None,  # Draws for prob_top (default: 1e8 / groups)
    seed: Optional[int] = None,  # Seed of every random draw
    intervals: Optional[Literal['plug-in', 'corrected']] = None,  # Intervals plug-in (default) or corrected
    level: Optional[float] = None,  # Credible level, 0 to 1
    output: Optional[Union[str, os.PathLike[str]]] = None,  # Output table (.csv, .parquet or .arrow)
    pair_output: Optional[Union[str, os.PathLike[str]]] = None,  # Also write a pair table, to join back in SQL
    summary: Optional[Union[str, os.PathLike[str]]] = None,  # Summary file (JSON), written last
    report: Optional[Union[str, os.PathLike[str]]] = None,  # Also write the HTML report of the run
    plots: Optional[Union[str, os.PathLike[str]]] = None,  # Also write each plot into this folder
    plot_format: Optional[Literal['svg', 'png']] = None,  # svg or png, for --plots
    map: Optional[Union[str, os.PathLike[str]]] = None,  # Draw the areas of this map in the report
    map_key: Optional[str] = None,  # The map's property naming each area's group
    threads: Optional[int] = None,  # Worker threads (default: all cores)
    quiet: Optional[bool] = None,  # Print nothing but errors
    timings: Optional[bool] = None,  # Print the wall time of each phase on stderr
    progress: Optional[bool] = None,  # Report progress on stderr
    log_format: Optional[Literal['text', 'json']] = None,  # How stderr speaks: text, or json for schedulers
    level_counts: Optional[Union[str, Sequence[str]]] = None,  # Count columns, one per level
    level_scores: Optional[Union[str, Sequence[float]]] = None,  # Each level's score (1, 2, ..., K)
    levels: Optional[Union[str, Sequence[Union[str, int]]]] = None,  # Values of --outcome, one per level
    share_above: Optional[str] = None,  # Add prob_share_above for one level
    variance_method: Optional[Literal['ml', 'reml']] = None,  # normal-normal's tau^2 by ml (default) or reml
    prior_shape: Optional[Literal['parametric', 'free']] = None,  # parametric (default) or free (any shape)
    grid_points: Optional[int] = None,  # Points of a free prior's grid (default 300+)
    neighbours: Optional[Union[str, os.PathLike[str]]] = None,  # Pull each area toward its neighbours' rate
) -> Result: ...

def score(
    data: Any,
    prior: Union[str, os.PathLike[str], Dict[str, Any]],
    *,
    model: Optional[Model] = None,  # The model (default: the prior file's)
    config: Optional[Union[str, os.PathLike[str]]] = None,  # A job file (TOML) holding options
    outcome: Optional[str] = None,  # Rows are trials: this column holds 1 or 0
    population: Optional[str] = None,  # Rows are areas by stratum; their population
    strata: Optional[Union[str, Sequence[str]]] = None,  # Columns that make a stratum
    reference_rates: Optional[Union[str, os.PathLike[str]]] = None,  # Rates by stratum of an external standard
    aggregate: Optional[bool] = None,  # Rows are parts of groups: sum them per group first
    on_invalid: Optional[Literal['error', 'skip']] = None,  # On an invalid row: error (stop; default) or skip
    rejects: Optional[Union[str, os.PathLike[str]]] = None,  # Where skipped rows go (.csv or .parquet)
    delimiter: Optional[str] = None,  # CSV field separator, or tab
    memory_budget: Optional[int] = None,  # Memory to stay within, in MB (1024)
    batch_rows: Optional[int] = None,  # Rows per batch read
    successes: Optional[str] = None,  # Column of successes (beta-binomial)
    trials: Optional[str] = None,  # Column of trials (beta-binomial)
    events: Optional[str] = None,  # Column of events (gamma-poisson)
    exposure: Optional[str] = None,  # Exposure or expected counts (gamma-poisson)
    estimate: Optional[str] = None,  # Column of estimates, one per group (normal-normal)
    std_error: Optional[str] = None,  # Standard errors of the estimates (normal-normal)
    above: Optional[float] = None,  # Add prob_above: P(rate > T)
    below: Optional[float] = None,  # Add prob_below: P(rate < T)
    covariates: Optional[Union[str, Sequence[str]]] = None,  # Centre priors on these columns
    covariates_log: Optional[Union[str, Sequence[str]]] = None,  # Covariates entered as their log
    covariates_levels: Optional[Union[str, Sequence[str]]] = None,  # Covariates entered as levels
    flag_fdr: Optional[float] = None,  # Flag at a Bayesian false-discovery rate Q
    ranks: Optional[bool] = None,  # Add rank_mean and rank_conservative
    rank_lowest_first: Optional[bool] = None,  # Rank the lowest rates first (implies --ranks)
    top: Optional[int] = None,  # Add prob_top: P(among the K highest)
    top_method: Optional[Literal['auto', 'draws', 'threshold']] = None,  # prob_top's method: auto, draws or threshold
    top_draws: Optional[int] = None,  # Draws for prob_top (default: 1e8 / groups)
    seed: Optional[int] = None,  # Seed of every random draw
    intervals: Optional[Literal['plug-in', 'corrected']] = None,  # Intervals plug-in (default) or corrected
    level: Optional[float] = None,  # Credible level, 0 to 1
    pair_output: Optional[Union[str, os.PathLike[str]]] = None,  # Also write a pair table, to join back in SQL
    summary: Optional[Union[str, os.PathLike[str]]] = None,  # Summary file (JSON), written last
    report: Optional[Union[str, os.PathLike[str]]] = None,  # Also write the HTML report of the run
    plots: Optional[Union[str, os.PathLike[str]]] = None,  # Also write each plot into this folder
    plot_format: Optional[Literal['svg', 'png']] = None,  # svg or png, for --plots
    map: Optional[Union[str, os.PathLike[str]]] = None,  # Draw the areas of this map in the report
    map_key: Optional[str] = None,  # The map's property naming each area's group
    threads: Optional[int] = None,  # Worker threads (default: all cores)
    quiet: Optional[bool] = None,  # Print nothing but errors
    timings: Optional[bool] = None,  # Print the wall time of each phase on stderr
    progress: Optional[bool] = None,  # Report progress on stderr
    log_format: Optional[Literal['text', 'json']] = None,  # How stderr speaks: text, or json for schedulers
    by: Optional[Union[str, Sequence[str]]] = None,  # Score each segment with its saved prior
    group: Optional[str] = None,  # Column holding the group id
    output: Optional[Union[str, os.PathLike[str]]] = None,  # Output table (.csv, .parquet or .arrow)
) -> Result: ...

def fit_pairs(
    pairs: Any,
    weights: str,
    *,
    model: Optional[Model] = None,  # beta-binomial, gamma-poisson, normal-normal, ...
    config: Optional[Union[str, os.PathLike[str]]] = None,  # A job file (TOML) holding options
    outcome: Optional[str] = None,  # Rows are trials: this column holds 1 or 0
    population: Optional[str] = None,  # Rows are areas by stratum; their population
    strata: Optional[Union[str, Sequence[str]]] = None,  # Columns that make a stratum
    reference_rates: Optional[Union[str, os.PathLike[str]]] = None,  # Rates by stratum of an external standard
    aggregate: Optional[bool] = None,  # Rows are parts of groups: sum them per group first
    on_invalid: Optional[Literal['error', 'skip']] = None,  # On an invalid row: error (stop; default) or skip
    rejects: Optional[Union[str, os.PathLike[str]]] = None,  # Where skipped rows go (.csv or .parquet)
    delimiter: Optional[str] = None,  # CSV field separator, or tab
    memory_budget: Optional[int] = None,  # Memory to stay within, in MB (1024)
    batch_rows: Optional[int] = None,  # Rows per batch read
    group: Optional[str] = None,  # Column holding the group id
    successes: Optional[str] = None,  # Column of successes (beta-binomial)
    trials: Optional[str] = None,  # Column of trials (beta-binomial)
    events: Optional[str] = None,  # Column of events (gamma-poisson)
    exposure: Optional[str] = None,  # Exposure or expected counts (gamma-poisson)
    estimate: Optional[str] = None,  # Column of estimates, one per group (normal-normal)
    std_error: Optional[str] = None,  # Standard errors of the estimates (normal-normal)
    above: Optional[float] = None,  # Add prob_above: P(rate > T)
    below: Optional[float] = None,  # Add prob_below: P(rate < T)
    by: Optional[Union[str, Sequence[str]]] = None,  # Fit one prior per segment of these columns
    min_groups: Optional[int] = None,  # Groups a segment needs for its own prior (30)
    covariates: Optional[Union[str, Sequence[str]]] = None,  # Centre priors on these columns
    covariates_log: Optional[Union[str, Sequence[str]]] = None,  # Covariates entered as their log
    covariates_levels: Optional[Union[str, Sequence[str]]] = None,  # Covariates entered as levels
    flag_fdr: Optional[float] = None,  # Flag at a Bayesian false-discovery rate Q
    ranks: Optional[bool] = None,  # Add rank_mean and rank_conservative
    rank_lowest_first: Optional[bool] = None,  # Rank the lowest rates first (implies --ranks)
    top: Optional[int] = None,  # Add prob_top: P(among the K highest)
    top_method: Optional[Literal['auto', 'draws', 'threshold']] = None,  # prob_top's method: auto, draws or threshold
    top_draws: Optional[int] = None,  # Draws for prob_top (default: 1e8 / groups)
    seed: Optional[int] = None,  # Seed of every random draw
    intervals: Optional[Literal['plug-in', 'corrected']] = None,  # Intervals plug-in (default) or corrected
    level: Optional[float] = None,  # Credible level, 0 to 1
    output: Optional[Union[str, os.PathLike[str]]] = None,  # Output table (.csv, .parquet or .arrow)
    pair_output: Optional[Union[str, os.PathLike[str]]] = None,  # Also write a pair table, to join back in SQL
    summary: Optional[Union[str, os.PathLike[str]]] = None,  # Summary file (JSON), written last
    report: Optional[Union[str, os.PathLike[str]]] = None,  # Also write the HTML report of the run
    plots: Optional[Union[str, os.PathLike[str]]] = None,  # Also write each plot into this folder
    plot_format: Optional[Literal['svg', 'png']] = None,  # svg or png, for --plots
    map: Optional[Union[str, os.PathLike[str]]] = None,  # Draw the areas of this map in the report
    map_key: Optional[str] = None,  # The map's property naming each area's group
    threads: Optional[int] = None,  # Worker threads (default: all cores)
    quiet: Optional[bool] = None,  # Print nothing but errors
    timings: Optional[bool] = None,  # Print the wall time of each phase on stderr
    progress: Optional[bool] = None,  # Report progress on stderr
    log_format: Optional[Literal['text', 'json']] = None,  # How stderr speaks: text, or json for schedulers
    level_counts: Optional[Union[str, Sequence[str]]] = None,  # Count columns, one per level
    level_scores: Optional[Union[str, Sequence[float]]] = None,  # Each level's score (1, 2, ..., K)
    levels: Optional[Union[str, Sequence[Union[str, int]]]] = None,  # Values of --outcome, one per level
    share_above: Optional[str] = None,  # Add prob_share_above for one level
    variance_method: Optional[Literal['ml', 'reml']] = None,  # normal-normal's tau^2 by ml (default) or reml
    prior_shape: Optional[Literal['parametric', 'free']] = None,  # parametric (default) or free (any shape)
    grid_points: Optional[int] = None,  # Points of a free prior's grid (default 300+)
    neighbours: Optional[Union[str, os.PathLike[str]]] = None,  # Pull each area toward its neighbours' rate
) -> Result: ...
