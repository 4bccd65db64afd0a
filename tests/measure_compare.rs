//! `compare` on torch 2.15 exports (tests/fixtures/torch, with onnxruntime 1.32 outputs) and on
//! copies rewritten by hand with the crate's protobuf types.
//!
//! Outside references:
//! - onnxruntime's outputs in each fixture's outputs.npz (the original model through our runner
//!   must match them within 1e-5 absolute);
//! - hard-swish vs swish worst case 3 / (1 + e^3) = 0.14227761953270035 at x = +-3 (Howard et al.
//!   2019, arXiv:1905.02244, hard-swish x * ReLU6(x + 3) / 6; the value is the closed form of
//!   |x sigmoid(x) - x| at x = 3);
//! - tanh-GELU vs GELU worst case 4.7323552e-4 at +-2.69894 (Hendrycks & Gimpel 2016,
//!   arXiv:1606.08415, tanh approximation; value from the project's reference facts, computed in
//!   double precision), checked as <= 4.74e-4.

mod measure_support;

use actswap::measure::capture;
use actswap::measure::result::LocalBasis;
use actswap::measure::{Budgets, CompareOptions, LatencyOptions, Scope, compare_models};
use actswap::run::{Compilation, prepare};
use measure_support as fx;
use ndarray::ArrayD;
use ndarray_npy::NpzReader;

/// Hard-swish vs swish worst case (Howard et al. 2019): 3 / (1 + e^3).
const HARD_SWISH_BOUND: f64 = 0.14227761953270035;
/// tanh-GELU vs GELU worst case (Hendrycks & Gimpel 2016 approximation), rounded up.
const TANH_GELU_BOUND: f64 = 4.74e-4;

fn no_latency() -> CompareOptions {
    CompareOptions {
        latency: None,
        ..CompareOptions::default()
    }
}

#[test]
fn a_model_against_itself_drifts_by_exactly_zero() {
    let ids = fx::fixture_ids();
    assert!(ids.len() >= 20, "{} fixtures", ids.len());
    for id in &ids {
        let model = fx::load(id);
        let samples = fx::samples(id, &model);

        // The runner reproduces onnxruntime's outputs (outputs.npz) within 1e-5.
        let tract = prepare(&model.encode(), Some(model.dir())).unwrap();
        let outputs = tract.run(&samples[0], &[]).unwrap();
        let mut npz =
            NpzReader::new(std::fs::File::open(fx::fixture_dir(id).join("outputs.npz")).unwrap())
                .unwrap();
        for t in &outputs {
            let want: ArrayD<f32> = npz.by_name(&t.name).unwrap();
            let got = t.to_f64().unwrap();
            let err = got
                .iter()
                .zip(want.iter())
                .map(|(g, &w)| (g - w as f64).abs())
                .fold(0.0, f64::max);
            assert!(err <= 1e-5, "{id} '{}': {err:e} from onnxruntime", t.name);
        }

        let r = compare_models(&model, &model, &samples, &no_latency()).unwrap();
        assert!(r.within_budget && r.offenders.is_empty(), "{id}");
        assert!(r.unmatched.is_empty(), "{id}: {:?}", r.unmatched);
        assert!(!r.sites.is_empty(), "{id}");
        for s in &r.sites {
            for d in [&s.local, &s.propagated] {
                let d = d
                    .as_ref()
                    .unwrap_or_else(|| panic!("{id} {}: {:?}", s.id_a, s.notes));
                assert_eq!(
                    (d.max_abs, d.mean_abs, d.rms, d.max_rel, d.cosine),
                    (0.0, 0.0, 0.0, 0.0, 1.0),
                    "{id} {}",
                    s.id_a
                );
                assert_eq!(d.beyond_tol + d.nonfinite_mismatches(), 0);
            }
            assert_eq!(s.bound_over_range, Some(0.0), "{id} {}", s.id_a);
            assert_eq!(
                s.local_basis,
                Some(LocalBasis::Identical),
                "{id} {}",
                s.id_a
            );
        }
        for o in &r.outputs {
            let m = o.metrics.as_ref().unwrap();
            assert_eq!((m.max_abs, m.cosine, m.beyond_tol), (0.0, 1.0, 0), "{id}");
            if let Some(t) = o.top1_agreement {
                assert_eq!(t.share, 1.0, "{id}");
            }
        }
    }
}

#[test]
fn silu_to_hard_swish_drifts_within_the_published_bound() {
    let id = "leaf-spot-ts-op13";
    let output = "/blocks.0/act/Mul_output_0";
    let model = fx::load(id);
    let rewritten = fx::silu_to_hard_swish(&model, output);
    let samples = fx::samples(id, &model);
    let r = compare_models(&model, &rewritten, &samples, &no_latency()).unwrap();
    let s = r.sites.iter().find(|s| s.output == output).unwrap();
    assert_eq!((s.kind_a.id, s.kind_b.id), ("silu", "hard_swish"));
    let local = s.local.as_ref().unwrap();
    assert!(local.max_abs > 0.0);
    assert!(local.max_abs <= HARD_SWISH_BOUND, "{:e}", local.max_abs);
    // The site's input reaches past +-3 here, so the catalogue's bound over the observed range
    // is the published worst case (to the precision of its search).
    let range = s.input_range.unwrap();
    assert!(range.min < -3.0 && range.max > 3.0, "{range:?}");
    let bound = s.bound_over_range.unwrap();
    assert!((bound - HARD_SWISH_BOUND).abs() < 1e-9, "{bound}");
    assert!(local.max_abs <= bound);
    assert_eq!(s.local_basis, Some(LocalBasis::Isolated));
    // The isolated original reproduces the site's value in the full model (closed form: same
    // ops on the same input, up to float32 rounding of a differently fused plan).
    assert!(s.isolation_max_abs.unwrap() <= 1e-5);
    // Every other site is untouched, so its local drift is exactly zero; downstream sites
    // see the change (propagated drift).
    for other in r.sites.iter().filter(|o| o.output != output) {
        assert_eq!(other.local.as_ref().unwrap().max_abs, 0.0, "{}", other.id_a);
    }
    assert!(s.propagated.as_ref().unwrap().max_abs > 0.0);
    assert!(r.outputs[0].metrics.as_ref().unwrap().max_abs > 0.0);
    assert!(r.within_budget, "no budget set");

    // A site budget tighter than the measured drift makes the site an offender, listed first.
    let tight = CompareOptions {
        budgets: Budgets {
            site_max_abs: Some(local.max_abs / 2.0),
            ..Budgets::default()
        },
        ..no_latency()
    };
    let r = compare_models(&model, &rewritten, &samples, &tight).unwrap();
    assert!(!r.within_budget);
    assert_eq!(r.offenders.len(), 1, "{:?}", r.offenders);
    assert_eq!(r.offenders[0].scope, Scope::Site);
    assert_eq!(r.offenders[0].name, output);
    assert_eq!(r.sites[0].output, output, "offending site first");
}

#[test]
fn gelu_to_tanh_gelu_drifts_within_the_published_bound() {
    let id = "pump-ts-op13";
    let output = "/blocks.0/act/Mul_1_output_0";
    let model = fx::load(id);
    let rewritten = fx::gelu_to_tanh(&model, output);
    let samples = fx::samples(id, &model);
    let r = compare_models(&model, &rewritten, &samples, &no_latency()).unwrap();
    let s = r.sites.iter().find(|s| s.output == output).unwrap();
    assert_eq!((s.kind_a.id, s.kind_b.id), ("gelu", "gelu_tanh"));
    let local = s.local.as_ref().unwrap();
    assert!(
        local.max_abs > 0.0 && local.max_abs <= TANH_GELU_BOUND,
        "{:e}",
        local.max_abs
    );
    assert!(s.bound_over_range.unwrap() <= 4.7323552e-4 + 1e-12);
    // fault_scores is [4, 3]: four rows of three class scores.
    let top1 = r.outputs[0].top1_agreement.unwrap();
    assert_eq!(top1.rows, 4);
}

#[test]
fn output_budgets_flag_outputs_and_latency_is_measured() {
    let id = "pump-ts-op13";
    let output = "/blocks.10/Mul_output_0";
    let model = fx::load(id);
    let rewritten = fx::silu_to_hard_swish(&model, output);
    let samples = fx::samples(id, &model);
    let opts = CompareOptions {
        budgets: Budgets {
            max_abs: Some(0.0),
            min_cosine: Some(1.0),
            ..Budgets::default()
        },
        latency: Some(LatencyOptions { runs: 3, warmup: 1 }),
        ..CompareOptions::default()
    };
    let r = compare_models(&model, &rewritten, &samples, &opts).unwrap();
    assert!(!r.within_budget);
    assert!(
        r.offenders
            .iter()
            .any(|o| o.scope == Scope::Output && o.metric == "max_abs")
    );
    // Latency is measured data: only check that it was measured.
    let l = r.latency.unwrap();
    for t in [l.a.median_s, l.a.p10_s, l.a.p90_s, l.b.median_s, l.ratio] {
        assert!(t.is_finite() && t > 0.0, "{t}");
    }
    let s = r.sites.iter().find(|s| s.output == output).unwrap();
    let sl = s.latency.unwrap();
    assert!(sl.a_median_s > 0.0 && sl.b_median_s > 0.0 && sl.ratio.is_finite());
}

#[test]
fn typed_runs_reproduce_onnxruntime_and_the_optimized_drift() {
    // Without latency, `compare` runs both models as typed graphs, nothing fused or folded.
    // Reference: onnxruntime's outputs (outputs.npz), within the 1e-5 the optimized runner is
    // held to above; and the drift the optimized plans give, within 1e-5 absolute (float32
    // rounding of differently fused plans of the same ops, common practice).
    for id in fx::fixture_ids() {
        let model = fx::load(&id);
        let samples = fx::samples(&id, &model);
        let typed = prepare(&model.encode(), Some(model.dir()))
            .unwrap()
            .with_compilation(Compilation::Typed);
        let outputs = typed.run(&samples[0], &[]).unwrap();
        let mut npz =
            NpzReader::new(std::fs::File::open(fx::fixture_dir(&id).join("outputs.npz")).unwrap())
                .unwrap();
        for t in &outputs {
            let want: ArrayD<f32> = npz.by_name(&t.name).unwrap();
            let got = t.to_f64().unwrap();
            let err = got
                .iter()
                .zip(want.iter())
                .map(|(g, &w)| (g - w as f64).abs())
                .fold(0.0, f64::max);
            assert!(err <= 1e-5, "{id} '{}': {err:e} from onnxruntime", t.name);
        }
    }

    let id = "leaf-spot-ts-op13";
    let output = "/blocks.0/act/Mul_output_0";
    let model = fx::load(id);
    let rewritten = fx::silu_to_hard_swish(&model, output);
    let samples = fx::samples(id, &model);
    // A model rewritten in memory reaches tract initializer by initializer: the same model as
    // its whole encoding, so the same values bit for bit.
    let whole = prepare(&rewritten.encode(), Some(rewritten.dir()))
        .unwrap()
        .run(&samples[0], &[])
        .unwrap();
    let parts = capture::load(&rewritten)
        .unwrap()
        .run(&samples[0], &[])
        .unwrap();
    assert_eq!(whole.len(), parts.len());
    for (w, p) in whole.iter().zip(&parts) {
        assert_eq!((&w.name, &w.tensor), (&p.name, &p.tensor));
    }
    let values_only = compare_models(&model, &rewritten, &samples, &no_latency()).unwrap();
    let optimized = CompareOptions {
        latency: Some(LatencyOptions { runs: 1, warmup: 0 }),
        ..CompareOptions::default()
    };
    let optimized = compare_models(&model, &rewritten, &samples, &optimized).unwrap();
    let close = |a: f64, b: f64, what: &str| assert!((a - b).abs() <= 1e-5, "{what}: {a} vs {b}");
    assert_eq!(values_only.sites.len(), optimized.sites.len());
    for (t, o) in values_only.sites.iter().zip(&optimized.sites) {
        assert_eq!(t.output, o.output);
        for (dt, d_o) in [(&t.local, &o.local), (&t.propagated, &o.propagated)] {
            let (dt, d_o) = (dt.as_ref().unwrap(), d_o.as_ref().unwrap());
            close(dt.max_abs, d_o.max_abs, &t.output);
            close(dt.rms, d_o.rms, &t.output);
            close(dt.cosine, d_o.cosine, &t.output);
        }
        assert_eq!(t.bound_over_range.is_some(), o.bound_over_range.is_some());
    }
    for (t, o) in values_only.outputs.iter().zip(&optimized.outputs) {
        let (mt, mo) = (t.metrics.as_ref().unwrap(), o.metrics.as_ref().unwrap());
        close(mt.max_abs, mo.max_abs, &t.name);
        close(mt.mean_abs, mo.mean_abs, &t.name);
    }
}
