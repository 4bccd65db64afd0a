//! The drift metrics against numpy 2.4.6 (a general-purpose reference library): the figures
//! below were printed by `python3 scripts/measure_reference.py` for the fixed arrays written out
//! in that script and here. Sums are taken in another order than numpy's pairwise summation, so
//! mean abs, RMS and cosine are compared to 1e-12 relative; maxima and counts exactly.

mod ladder;

use actswap::measure::metrics::{Top1Accumulator, drift, top1_applies};
use actswap::measure::range::RangeCollector;
use actswap::measure::{Drift, Tolerance};
use ndarray::{ArrayD, IxDyn};

use ladder::Tol;

fn array(values: &[f64]) -> ArrayD<f64> {
    ArrayD::from_shape_vec(IxDyn(&[values.len()]), values.to_vec()).unwrap()
}

fn close(got: f64, want: f64) -> bool {
    Tol::Double.holds(got, want)
}

fn check(d: &Drift, want: &[(&str, f64)]) {
    for &(name, value) in want {
        let got = match name {
            "elements" => d.elements as f64,
            "compared" => d.compared as f64,
            "max_abs" => d.max_abs,
            "mean_abs" => d.mean_abs,
            "rms" => d.rms,
            "max_rel" => d.max_rel,
            "cosine" => d.cosine,
            "beyond_tol" => d.beyond_tol as f64,
            "beyond_tol_share" => d.beyond_tol_share,
            "nan_mismatches" => d.nan_mismatches as f64,
            "inf_mismatches" => d.inf_mismatches as f64,
            _ => unreachable!(),
        };
        assert!(close(got, value), "{name}: got {got:e}, numpy {value:e}");
    }
}

/// numpy figures for plain_ref / plain_cand of scripts/measure_reference.py.
#[test]
fn finite_arrays_match_numpy() {
    let a = array(&[0.0, 1.0, -2.0, 3.5, 1e-7, -4.25, 100.0, 0.5]);
    let b = array(&[1e-6, 1.00002, -2.001, 3.5, 2e-7, -4.0, 100.05, 0.49]);
    let d = drift(&a, &b, Tolerance::default()).unwrap();
    check(
        &d,
        &[
            ("elements", 8.0),
            ("compared", 8.0),
            ("max_abs", 0.25),
            ("mean_abs", 0.03887763749999962),
            ("rms", 0.0902087858810117),
            ("max_rel", 1.0),
            ("cosine", 0.999996835835955),
            ("beyond_tol", 4.0),
            ("beyond_tol_share", 0.5),
            ("nan_mismatches", 0.0),
            ("inf_mismatches", 0.0),
        ],
    );
    assert_eq!(d.rel_floor, 1e-6);
    assert_eq!(d.cosine_note, None);
}

/// numpy figures for odd_ref / odd_cand: NaN and infinities on either side.
#[test]
fn non_finite_values_are_counted_not_dropped() {
    let (nan, inf) = (f64::NAN, f64::INFINITY);
    let a = array(&[1.0, nan, inf, -inf, 2.0, nan, 3.0, -1.5]);
    let b = array(&[1.25, 1.0, inf, inf, nan, nan, 3.0, -1.0]);
    let d = drift(&a, &b, Tolerance::default()).unwrap();
    check(
        &d,
        &[
            ("elements", 8.0),
            ("compared", 3.0),
            ("max_abs", 0.5),
            ("mean_abs", 0.25),
            ("rms", 0.3227486121839514),
            ("max_rel", 0.3333333333333333),
            ("cosine", 0.9872882068116847),
            ("beyond_tol", 5.0),
            ("beyond_tol_share", 0.625),
            ("nan_mismatches", 2.0),
            ("inf_mismatches", 1.0),
        ],
    );
    // inf facing inf and NaN facing NaN agree.
    assert_eq!(d.nonfinite_agreeing, 2);
}

/// Closed forms: identical arrays drift by exactly 0 with cosine exactly 1 (sqrt(x * x) == x
/// in IEEE 754 arithmetic); two all-zero arrays have cosine 1 by the stated convention, one
/// all-zero array cosine 0.
#[test]
fn identical_and_zero_arrays() {
    let a = array(&[0.3, -1.7, 2.9, 1e-30, 123.456]);
    let d = drift(&a, &a, Tolerance::default()).unwrap();
    assert_eq!(
        (d.max_abs, d.mean_abs, d.rms, d.max_rel, d.cosine),
        (0.0, 0.0, 0.0, 0.0, 1.0)
    );
    assert_eq!(d.beyond_tol, 0);
    let z = array(&[0.0; 4]);
    let both = drift(&z, &z, Tolerance::default()).unwrap();
    assert_eq!(
        (both.cosine, both.cosine_note),
        (1.0, Some("both all zero"))
    );
    let one = drift(&z, &array(&[0.0, 1.0, 0.0, 0.0]), Tolerance::default()).unwrap();
    assert_eq!(
        (one.cosine, one.cosine_note),
        (0.0, Some("one side all zero"))
    );
    assert!(
        drift(&a, &z, Tolerance::default()).is_err(),
        "shapes differ"
    );
}

/// Tolerances are the caller's: atol 0.3 / rtol 0 leaves no element of the plain arrays beyond;
/// a floor of 1 makes max rel the largest |b - a| / max(|a|, 1).
#[test]
fn tolerances_are_settable() {
    let a = array(&[0.0, 1.0, -2.0, 3.5, 1e-7, -4.25, 100.0, 0.5]);
    let b = array(&[1e-6, 1.00002, -2.001, 3.5, 2e-7, -4.0, 100.05, 0.49]);
    let tol = Tolerance {
        atol: 0.3,
        rtol: 0.0,
        rel_floor: 1.0,
    };
    let d = drift(&a, &b, tol).unwrap();
    assert_eq!(d.beyond_tol, 0);
    // |-4.0 - -4.25| / 4.25 is the largest ratio (closed form).
    assert_eq!(d.max_rel, 0.25 / 4.25);
    assert_eq!((d.atol, d.rtol, d.rel_floor), (0.3, 0.0, 1.0));
}

/// numpy.argmax over the last axis of top1_ref / top1_cand gives [1, 0, 0] and [2, 1, 0]
/// (the first maximum wins; a NaN counts as the maximum): one row of three agrees.
#[test]
fn top1_agreement_follows_numpy_argmax() {
    let nan = f64::NAN;
    let a = ArrayD::from_shape_vec(
        IxDyn(&[3, 4]),
        vec![0.1, 0.7, 0.2, 0.0, 1.0, 1.0, 0.5, 0.2, 3.0, -1.0, 2.0, 2.5],
    )
    .unwrap();
    let b = ArrayD::from_shape_vec(
        IxDyn(&[3, 4]),
        vec![0.1, 0.6, 0.65, 0.0, 0.9, 1.0, 0.5, 0.2, nan, 0.0, 0.0, 4.0],
    )
    .unwrap();
    let mut acc = Top1Accumulator::default();
    acc.add(&a, &b).unwrap();
    acc.add(&a, &a).unwrap();
    let t = acc.finish();
    assert_eq!((t.rows, t.agreeing), (6, 4));
    assert!(top1_applies(&[4, 3]) && !top1_applies(&[4, 1]) && !top1_applies(&[]));
}

/// numpy.min / max / percentile(.., 1) / percentile(.., 99) of range_values.
#[test]
fn input_range_matches_numpy_percentiles() {
    let mut r = RangeCollector::default();
    r.add(&array(&[-3.0, 0.5, 7.25, -0.125, 2.0, 1.0, -8.5]));
    r.add(&array(&[
        4.0,
        0.0,
        3.3,
        -1.1,
        6.6,
        2.2,
        -5.5,
        9.0,
        f64::NAN,
    ]));
    let r = r.finish().unwrap();
    assert_eq!((r.min, r.max), (-8.5, 9.0));
    assert!(close(r.p01, -8.08), "{}", r.p01);
    assert!(close(r.p99, 8.754999999999999), "{}", r.p99);
    assert_eq!(r.nonfinite, 1);
    assert!(RangeCollector::default().finish().is_none());
}
