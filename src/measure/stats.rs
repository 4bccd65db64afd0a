//! Order statistics shared by input ranges and latency: quantiles as numpy computes them.

/// The `q`-quantile (`0 <= q <= 1`) of `values` by linear interpolation between order
/// statistics, numpy's default method (`numpy.quantile(values, q)`): position `q * (n - 1)`,
/// interpolated as numpy's `_lerp` does. Reorders `values`; NaN when `values` is empty.
/// `values` must hold no NaN.
pub fn quantile(values: &mut [f64], q: f64) -> f64 {
    let n = values.len();
    if n == 0 {
        return f64::NAN;
    }
    let position = q.clamp(0.0, 1.0) * (n - 1) as f64;
    let below = (position.floor() as usize).min(n - 1);
    let t = position - below as f64;
    let (_, &mut a, rest) = values.select_nth_unstable_by(below, f64::total_cmp);
    if t == 0.0 || rest.is_empty() {
        return a;
    }
    let b = rest.iter().copied().fold(f64::INFINITY, f64::min);
    let diff = b - a;
    if t >= 0.5 {
        b - diff * (1.0 - t)
    } else {
        a + diff * t
    }
}

#[cfg(test)]
mod tests {
    use super::quantile;

    /// numpy 2.4.6: `numpy.percentile([4, 1, 3, 2], [0, 25, 50, 100])` = 1, 1.75, 2.5, 4.
    #[test]
    fn matches_numpy_linear_percentiles() {
        let mut v = [4.0, 1.0, 3.0, 2.0];
        assert_eq!(quantile(&mut v, 0.0), 1.0);
        assert_eq!(quantile(&mut v, 0.25), 1.75);
        assert_eq!(quantile(&mut v, 0.5), 2.5);
        assert_eq!(quantile(&mut v, 1.0), 4.0);
        assert!(quantile(&mut [], 0.5).is_nan());
    }
}
