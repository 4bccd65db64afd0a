//! Numerically careful scalar pieces shared by the kind formulas and by parameter recovery.

/// Beyond this |x|, e^-|x| is 0 in f64 (the least subnormal is about e^-744.4): the tails below
/// return what the formulas give there without calling `exp`, whose underflow path is slow.
const EXP_UNDERFLOW: f64 = 746.0;

/// Logistic sigmoid, split by sign so that neither branch overflows.
pub fn sigmoid(x: f64) -> f64 {
    if x.abs() >= EXP_UNDERFLOW {
        return if x > 0.0 { 1.0 } else { 0.0 };
    }
    if x >= 0.0 {
        1.0 / (1.0 + (-x).exp())
    } else {
        let e = x.exp();
        e / (1.0 + e)
    }
}

/// ln(1 + e^x) as max(x, 0) + ln_1p(e^-|x|): no overflow, no loss in either tail.
pub fn softplus(x: f64) -> f64 {
    if x.abs() >= EXP_UNDERFLOW {
        return x.max(0.0) + 0.0;
    }
    x.max(0.0) + (-x.abs()).exp().ln_1p()
}

/// Inverse of [`sigmoid`] on (0, 1).
pub fn logit(p: f64) -> f64 {
    p.ln() - (-p).ln_1p()
}

/// True when `value` and `target` round to the same float32: `value` is `target` up to the
/// rounding of a float32 constant.
pub fn same_f32(value: f64, target: f64) -> bool {
    value as f32 == target as f32
}

/// Bisects a predicate that is false at `lo` and true at `hi` down to adjacent doubles and
/// returns the last point where it is false and the first where it is true.
pub fn bisect(mut lo: f64, mut hi: f64, is_above: impl Fn(f64) -> bool) -> (f64, f64) {
    for _ in 0..2200 {
        let mid = lo + (hi - lo) / 2.0;
        if mid <= lo || mid >= hi {
            break;
        }
        if is_above(mid) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    (lo, hi)
}

/// Evaluates `f` and returns the value only when it is finite.
pub fn finite(f: &dyn Fn(f64) -> f64, x: f64) -> Option<f64> {
    let y = f(x);
    y.is_finite().then_some(y)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sigmoid_is_finite_in_both_tails_and_logit_inverts_it() {
        assert_eq!(sigmoid(800.0), 1.0);
        assert_eq!(sigmoid(-800.0), 0.0);
        // Above x = 4, 1 - sigmoid(x) keeps ever fewer digits; recovery stays below 4.
        for x in [-30.0, -3.0, -0.5, 0.0, 0.25, 2.0, 4.0] {
            assert!(
                (logit(sigmoid(x)) - x).abs() <= 1e-13 * (1.0 + x.abs()),
                "{x}"
            );
        }
    }

    #[test]
    fn softplus_tails() {
        // Common practice: naive ln(1 + e^x) overflows; the stable form
        // returns x above and e^x below.
        assert_eq!(softplus(1000.0), 1000.0);
        assert_eq!(softplus(-800.0), 0.0);
        assert!((softplus(-40.0) - (-40.0f64).exp()).abs() < 1e-30);
        // The shortcut tails agree with the formulas evaluated in full.
        for x in [746.0, 800.0, 1e300, -746.0, -800.0, -1e300] {
            let e = (-f64::abs(x)).exp();
            assert_eq!(e, 0.0);
            assert_eq!(softplus(x), x.max(0.0) + e.ln_1p());
            let full = if x >= 0.0 {
                1.0 / (1.0 + e)
            } else {
                e / (1.0 + e)
            };
            assert_eq!(sigmoid(x).to_bits(), full.to_bits());
        }
        assert_eq!(softplus(0.0), std::f64::consts::LN_2);
    }

    #[test]
    fn bisect_reaches_adjacent_doubles() {
        let (lo, hi) = bisect(-1e6, 1e6 + 1.0, |x| x > 0.3);
        assert!(lo <= 0.3 && hi > 0.3);
        assert_eq!(lo.next_up(), hi);
    }

    #[test]
    fn float32_rounding_test() {
        assert!(same_f32(1.0 + 1e-12, 1.0));
        assert!(!same_f32(1.0 + f32::EPSILON as f64, 1.0));
        assert!(same_f32(0.16666667163372, 1.0 / 6.0));
        assert!(!same_f32(1e-30, 0.0));
    }
}
