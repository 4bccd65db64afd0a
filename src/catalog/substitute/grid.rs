//! Where [`super::max_abs_error`] samples the error: a uniform grid over a finite range, a
//! finer one over the core around 0, geometric grids beyond it (dense as far as the error still
//! changes, one point per octave after), the ends and the breakpoints; sorted, without repeats.

use super::{FAR, ROUNDING};

/// Half-width of the uniformly sampled core.
pub(super) const CORE: f64 = 64.0;
/// Grid step inside the core.
pub(super) const CORE_STEP: f64 = 1.0 / 64.0;
/// Minimum number of uniform steps over a finite interval.
const MIN_STEPS: usize = 4096;
/// Ratio between dense tail samples beyond the core: 16 per octave.
const TAIL_RATIO: f64 = 1.044_273_782_427_413_8;

/// Sample points for [`super::max_abs_error`] on a finite `[lo, hi]` with `breaks`, sorted and
/// without repeats. A side that stands for an infinite one (an end at +-FAR) is sampled densely
/// only as far as the error `err` still changes ([`settled`]), and once per octave beyond.
pub(super) fn samples(lo: f64, hi: f64, breaks: &[f64], err: &dyn Fn(f64) -> f64) -> Vec<f64> {
    // Each grid is made in order (those of the negative side reversed), so the whole is a
    // merge of sorted runs rather than a sort.
    let mut runs: Vec<Vec<f64>> = vec![vec![lo, hi]];
    let uniform = |a: f64, b: f64, steps: usize| -> Vec<f64> {
        (0..=steps)
            .map(|i| a + (b - a) * (i as f64 / steps as f64))
            .collect()
    };
    if hi - lo < FAR {
        runs.push(uniform(lo, hi, MIN_STEPS));
    }
    let (a, b) = (lo.max(-CORE), hi.min(CORE));
    if a < b {
        runs.push(uniform(a, b, ((b - a) / CORE_STEP).ceil() as usize));
    }
    let signed = |sign: f64, grid: &mut dyn Iterator<Item = f64>| -> Vec<f64> {
        let mut run: Vec<f64> = grid.map(|t| sign * t).collect();
        if sign < 0.0 {
            run.reverse();
        }
        run
    };
    for (sign, end) in [(1.0, hi), (-1.0, -lo)] {
        let dense_to = if end == FAR {
            runs.push(signed(sign, &mut octaves()));
            for &x in breaks
                .iter()
                .filter(|x| x.signum() == sign && x.abs() > CORE)
            {
                // An octave of dense samples on each side of a kink or a jump far out.
                runs.push(signed(sign, &mut dense_tail(x.abs() / 2.0, x.abs() * 2.0)));
            }
            settled(sign, err)
        } else {
            end
        };
        runs.push(signed(sign, &mut dense_tail(CORE, dense_to)));
    }
    runs.push(breaks.to_vec());
    for run in &mut runs {
        run.retain(|x| (lo..=hi).contains(x));
    }
    merge_dedup(runs)
}

/// The values of all `runs` in [`f64::total_cmp`] order without repeats (`==`), as
/// concatenating them, `sort_by(f64::total_cmp)` and `dedup()` give. Runs already in order (the
/// sampling grids) are merged without sorting; any other is sorted first. Works on integer keys
/// whose order is `total_cmp`'s: several times faster than comparing floats.
fn merge_dedup(runs: Vec<Vec<f64>>) -> Vec<f64> {
    const SIGN: u64 = 1 << 63;
    // Negative floats order by their flipped bits, positive ones after them.
    let key = |x: f64| {
        let b = x.to_bits();
        if b & SIGN != 0 { !b } else { b | SIGN }
    };
    let float = |k: u64| f64::from_bits(if k & SIGN != 0 { k & !SIGN } else { !k });
    let mut keyed: Vec<Vec<u64>> = runs
        .into_iter()
        .map(|run| {
            let mut keys: Vec<u64> = run.into_iter().map(key).collect();
            if !keys.is_sorted() {
                keys.sort_unstable();
            }
            keys
        })
        .collect();
    // Shortest first, so that the long grids are merged last and copied once or twice.
    keyed.sort_by_key(Vec::len);
    let mut keys = keyed
        .into_iter()
        .reduce(|a, b| merge(&a, &b))
        .unwrap_or_default();
    keys.dedup();
    let mut xs: Vec<f64> = keys.into_iter().map(float).collect();
    // -0.0 == 0.0: the sorted floats still hold both where both were sampled.
    xs.dedup();
    xs
}

/// Two sorted lists as one.
fn merge(a: &[u64], b: &[u64]) -> Vec<u64> {
    let mut out = Vec::with_capacity(a.len() + b.len());
    let (mut i, mut j) = (0, 0);
    while i < a.len() && j < b.len() {
        if a[i] <= b[j] {
            out.push(a[i]);
            i += 1;
        } else {
            out.push(b[j]);
            j += 1;
        }
    }
    out.extend_from_slice(&a[i..]);
    out.extend_from_slice(&b[j..]);
    out
}

/// The tail grid (16 points per octave, from `CORE` outwards) within `(from, to]`.
pub(super) fn dense_tail(from: f64, to: f64) -> impl Iterator<Item = f64> {
    std::iter::successors(Some(CORE), |t| Some(t * TAIL_RATIO))
        .skip(1)
        .take_while(move |&t| t <= to.min(FAR) * TAIL_RATIO)
        .filter(move |&t| t > from && t <= to)
}

/// One point per octave beyond the core, up to `FAR`.
fn octaves() -> impl Iterator<Item = f64> {
    std::iter::successors(Some(CORE * 2.0), |t| Some(t * 2.0)).take_while(|&t| t < FAR)
}

/// Where the error on the side of `sign` stops changing: the outermost of the once-per-octave
/// samples whose error differs (beyond rounding) from the error at `FAR`, times 4 (two octaves
/// more); `CORE` when none does. Beyond that point every octave's sample has the limit's value,
/// and the catalogue's kinds change only at their breakpoints (sampled densely on their own)
/// or over a width that grows with |x| (x sigmoid(b x) turns over a width of about 1 / b around
/// 1 / b; a far tail is a constant or linear function plus a term that decays like e^-|x| or,
/// for softsign, 1 / |x|): a change between two samples an octave apart would be a feature
/// narrower than an octave beyond every scale of both kinds.
fn settled(sign: f64, err: &dyn Fn(f64) -> f64) -> f64 {
    let limit = err(sign * FAR);
    let differs = |t: &f64| {
        let e = err(sign * t);
        let same = (e - limit).abs() <= ROUNDING * e.max(limit);
        !same
    };
    let last = octaves()
        .collect::<Vec<f64>>()
        .into_iter()
        .rev()
        .find(differs);
    last.map_or(CORE, |t| t * 4.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn merged_runs_sort_as_total_cmp_does() {
        // Rust's own total order of floats (f64::total_cmp) is the reference, applied to all
        // the runs at once.
        let runs = vec![
            vec![
                3.5, -0.0, 0.0, -1e300, 1e-310, -1e-310, 2.0, 2.0, -3.5, 0.0, 64.0, -64.0, 1e300,
            ],
            (0..4096)
                .map(|i| -5.0 + 10.0 * (i as f64 / 4096.0))
                .collect(),
            (0..4096).rev().map(|i| (i as f64).sqrt() - 20.0).collect(),
            vec![-0.0, 0.0, 0.0, 1.0],
            Vec::new(),
            vec![-2.0, -1.0, -0.0],
        ];
        let mut expected = runs.concat();
        expected.sort_by(f64::total_cmp);
        expected.dedup();
        let bits = |xs: &[f64]| xs.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&merge_dedup(runs)), bits(&expected));
    }

    proptest::proptest! {
        /// Any runs, each left as drawn or put in order first: the same values as sorting
        /// them all by `total_cmp` (Rust's reference order) and dropping repeats.
        #[test]
        fn merged_runs_match_a_full_sort(
            runs in proptest::collection::vec(
                (proptest::collection::vec(proptest::num::f64::ANY, 0..40), proptest::bool::ANY),
                0..8,
            )
        ) {
            let runs: Vec<Vec<f64>> = runs
                .into_iter()
                .map(|(mut run, ordered)| {
                    run.retain(|x| !x.is_nan());
                    if ordered {
                        run.sort_by(f64::total_cmp);
                    }
                    run
                })
                .collect();
            let mut expected = runs.concat();
            expected.sort_by(f64::total_cmp);
            expected.dedup();
            let bits = |xs: &[f64]| xs.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
            proptest::prop_assert_eq!(bits(&merge_dedup(runs)), bits(&expected));
        }
    }
}
