//! How much the groups were pulled toward the pool: summaries of the pool
//! weights, of the shift from raw rate to posterior mean, and the rank
//! correlation between the raw and the shrunken ranking.

/// Summary of the pull toward the pool over all scored groups.
#[derive(Debug, Clone, PartialEq)]
pub struct Pull {
    /// Mean pool weight B.
    pub pool_weight_mean: f64,
    /// Median pool weight.
    pub pool_weight_median: f64,
    /// 10th percentile of the pool weight.
    pub pool_weight_p10: f64,
    /// 90th percentile of the pool weight.
    pub pool_weight_p90: f64,
    /// Mean |posterior mean − raw rate| over groups with a raw rate.
    pub mean_abs_shift: Option<f64>,
    /// Largest |posterior mean − raw rate|.
    pub max_abs_shift: Option<f64>,
    /// Row index of the group with the largest shift.
    pub max_shift_row: Option<usize>,
    /// Spearman correlation of raw rates and posterior means.
    pub rank_correlation: Option<f64>,
}

/// Quantile of sorted data by linear interpolation between order statistics
/// (the "type 7" definition, the default of R and numpy; common practice).
pub fn sorted_quantile(sorted: &[f64], q: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * q;
    let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Ranks 1..n with ties given their average rank.
pub fn average_ranks(values: &[f64]) -> Vec<f64> {
    let mut order: Vec<usize> = (0..values.len()).collect();
    order.sort_by(|&a, &b| values[a].total_cmp(&values[b]));
    let mut ranks = vec![0.0; values.len()];
    let mut start = 0;
    while start < order.len() {
        let mut end = start + 1;
        while end < order.len() && values[order[end]] == values[order[start]] {
            end += 1;
        }
        let rank = (start + end + 1) as f64 / 2.0;
        for &i in &order[start..end] {
            ranks[i] = rank;
        }
        start = end;
    }
    ranks
}

/// Pearson correlation; None when either side has no spread.
fn pearson(x: &[f64], y: &[f64]) -> Option<f64> {
    let n = x.len() as f64;
    let (mx, my) = (x.iter().sum::<f64>() / n, y.iter().sum::<f64>() / n);
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        sxy += (a - mx) * (b - my);
        sxx += (a - mx) * (a - mx);
        syy += (b - my) * (b - my);
    }
    (sxx > 0.0 && syy > 0.0).then(|| sxy / (sxx * syy).sqrt())
}

/// Spearman's rank correlation (Pearson correlation of average ranks).
pub fn spearman(x: &[f64], y: &[f64]) -> Option<f64> {
    if x.len() < 2 {
        return None;
    }
    pearson(&average_ranks(x), &average_ranks(y))
}

/// Computes the pull summary from per-group raw rates (None where there is no
/// data), posterior means and pool weights.
pub fn pull(raw: &[Option<f64>], posterior_mean: &[f64], pool_weight: &[f64]) -> Pull {
    let mut weights = pool_weight.to_vec();
    weights.sort_by(f64::total_cmp);
    let (mut raws, mut posts) = (Vec::new(), Vec::new());
    let (mut total_shift, mut max_shift, mut max_row) = (0.0, f64::NEG_INFINITY, None);
    for (row, (r, &p)) in raw.iter().zip(posterior_mean).enumerate() {
        if let Some(r) = *r {
            let shift = (p - r).abs();
            total_shift += shift;
            if shift > max_shift {
                max_shift = shift;
                max_row = Some(row);
            }
            raws.push(r);
            posts.push(p);
        }
    }
    let empty = weights.is_empty();
    let q = |p: f64| if empty { 0.0 } else { sorted_quantile(&weights, p) };
    Pull {
        pool_weight_mean: if empty { 0.0 } else { weights.iter().sum::<f64>() / weights.len() as f64 },
        pool_weight_median: q(0.5),
        pool_weight_p10: q(0.1),
        pool_weight_p90: q(0.9),
        mean_abs_shift: (!raws.is_empty()).then(|| total_shift / raws.len() as f64),
        max_abs_shift: max_row.map(|_| max_shift),
        max_shift_row: max_row,
        rank_correlation: spearman(&raws, &posts),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ties_share_their_average_rank() {
        assert_eq!(average_ranks(&[3.0, 1.0, 3.0, 2.0]), vec![3.5, 1.0, 3.5, 2.0]);
    }

    #[test]
    fn spearman_of_a_monotone_map_is_one_and_of_a_reversal_minus_one() {
        let x = [0.1, 0.5, 0.2, 0.9];
        let y: Vec<f64> = x.iter().map(|v| v * v * v).collect();
        assert!((spearman(&x, &y).unwrap() - 1.0).abs() < 1e-15);
        let z: Vec<f64> = x.iter().map(|v| -v).collect();
        assert!((spearman(&x, &z).unwrap() + 1.0).abs() < 1e-15);
    }

    #[test]
    fn quantiles_interpolate_like_numpy_default() {
        // numpy.percentile([1, 2, 3, 4], 10) = 1.3 (linear method; from memory).
        assert!((sorted_quantile(&[1.0, 2.0, 3.0, 4.0], 0.1) - 1.3).abs() < 1e-12);
    }
}
