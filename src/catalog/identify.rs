//! Numeric identification: which kind (with which parameters) a scalar function is, for the
//! scanner and for every test that checks it.
//!
//! The scanner hands over an element-wise chain as a scalar function `f` evaluated in f64, whose
//! constants are typically float32-rounded. Each kind in registry order recovers its parameters by
//! probing `f`, then the candidate `reference(x, params)` is compared with `f`, first at a few
//! quick probes that reject most wrong kinds cheaply, then on a fixed dense probe set; the first
//! kind that fits everywhere wins. A chain with per-channel constants is identified channel by
//! channel ([`identify_channels`]).

use std::sync::OnceLock;

use rayon::prelude::*;

use super::all;
use super::kind::Kind;
use super::params::Params;

/// Relative tolerance of a match: `|f(x) - g(x)| <= MATCH_RTOL * (1 + |g(x)|)` at every probe.
///
/// Why 2e-6:
/// - A float32 constant is off by at most 2^-24 = 6.0e-8 relative. In every kind the output's
///   sensitivity to a fixed constant is at most about 1, so a chain with float32 constants
///   evaluated in f64 stays within ~1e-7 of the f64 formula (the tests measure at most 4.5e-8,
///   for HardSwish's 0.16666667163372). Parameters that are recovered absorb their own rounding.
/// - A chain evaluated entirely in float32 stays within a few float32 ulps (2^-23 = 1.2e-7 each)
///   plus cancellation: at most 1e-6 in the tests (mish with the naive float32 softplus near
///   x = -16.6, where 1 + e^x rounds), typically below 1e-7.
/// - The closest pairs it must keep apart differ far more: exact vs tanh GELU by up to 4.7e-4 at
///   x = +-2.7 (at x = -2.7, where |g| is 0.009, that is 230 times the tolerance, and it stays
///   above the tolerance on a wide band of probes), silu vs hard_swish by 0.14, HardSigmoid 0.2
///   vs 1/6 by 1/12 at x = +-2.5.
pub const MATCH_RTOL: f64 = 2e-6;

/// Quick probes tried before the full probe set: they reject most wrong kinds cheaply.
const QUICK_PROBES: &[f64] = &[
    -7.5, -3.1, -1.7, -0.6, -0.15, 0.2, 0.55, 1.3, 2.4, 3.9, 6.6, 11.0,
];

/// Whether a chain value `f` agrees with a reference value `g` (equal infinities agree).
pub fn fits(f: f64, g: f64) -> bool {
    f == g || (f - g).abs() <= MATCH_RTOL * (1.0 + g.abs())
}

/// The fixed probe set, sorted: x in [-40, 40] every 1/32, x = c +- {1e-9, 1e-6, 1e-3} around
/// c in {0, +-1, +-3, +-6} (kinks of relu, relu6, hard_swish, hard_sigmoid), and the tails
/// +-{50, 60, 70, 80}. The tails stop below 88.72, where float32 exp overflows, so that a chain
/// evaluated in float32 with a naive Exp is still identified.
pub fn probe_points() -> &'static [f64] {
    static PROBES: OnceLock<Vec<f64>> = OnceLock::new();
    PROBES.get_or_init(|| {
        let mut v: Vec<f64> = (-1280..=1280).map(|i| f64::from(i) / 32.0).collect();
        for c in [0.0, 1.0, -1.0, 3.0, -3.0, 6.0, -6.0] {
            for d in [1e-9, 1e-6, 1e-3] {
                v.push(c - d);
                v.push(c + d);
            }
        }
        v.extend([-80.0, -70.0, -60.0, -50.0, 50.0, 60.0, 70.0, 80.0]);
        v.sort_by(f64::total_cmp);
        v.dedup();
        v
    })
}

/// Whether `f` is `kind` with `params` at every probe (see [`MATCH_RTOL`]).
pub fn matches(kind: &Kind, f: &dyn Fn(f64) -> f64, params: &[f64], probes: &[f64]) -> bool {
    params.len() == kind.params.len()
        && params.iter().all(|p| p.is_finite())
        && probes.iter().all(|&x| fits(f(x), kind.eval(x, params)))
}

/// `kind`'s recovered parameters when `f` is that kind.
fn identify_as(kind: &Kind, f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let params = (kind.recover)(f)?;
    (matches(kind, f, &params, QUICK_PROBES) && matches(kind, f, &params, probe_points()))
        .then_some(params)
}

/// The first kind in registry order whose recovered parameters make it fit `f` on
/// [`probe_points`], with those parameters at full precision.
///
/// Parameters are not snapped to spec defaults. A special case wins over its general kind only
/// when the general kind's parameter rounds to the special value in float32: silu when swish's
/// beta rounds to 1.0, relu6 when clip's bounds round to 0 and 6, relu when f(-1) and f(-40) are
/// 0. A scalar function cannot tell prelu from leaky_relu (reported as leaky_relu) nor celu(1)
/// from elu(1) (reported as elu).
pub fn identify(f: &dyn Fn(f64) -> f64) -> Option<(&'static Kind, Vec<f64>)> {
    all()
        .iter()
        .find_map(|&kind| identify_as(kind, f).map(|p| (kind, p)))
}

/// Identifies a function with one parameter set per channel, `f(x, c)` for channels
/// `0..channels`; `shape` is the dims of its per-channel constants.
///
/// When every channel is the same kind and every parameter that varies may vary per channel,
/// that kind wins. Otherwise the first kind that fits every channel with its per-channel
/// parameters does (the kinds found first, then the registry's): channels read as silu and
/// as swish are a per-channel swish, a per-channel leaky_relu slope is a prelu. A kind whose
/// parameters vary although the catalogue gives them as scalars is kept when nothing else fits.
pub fn identify_channels(
    f: &(dyn Fn(f64, usize) -> f64 + Sync),
    channels: usize,
    shape: Option<Vec<usize>>,
) -> Option<(&'static Kind, Params)> {
    let found: Vec<(&'static Kind, Vec<f64>)> = each_channel(channels, |c| identify(&|x| f(x, c)))?;
    let first = found[0].0;
    let same_kind = found.iter().all(|(k, _)| k.id == first.id);
    if same_kind {
        let params = Params::from_channels(
            &found.iter().map(|(_, p)| p.clone()).collect::<Vec<_>>(),
            shape.clone(),
        );
        let allowed = params
            .values()
            .iter()
            .zip(first.params)
            .all(|(v, p)| p.per_channel || matches!(v, super::params::ParamValue::Scalar(_)));
        if allowed {
            return Some((first, params));
        }
    }
    let mut candidates: Vec<&'static Kind> = found.iter().map(|(k, _)| *k).collect();
    candidates.extend(all().iter().copied());
    candidates.retain(|k| k.params.iter().any(|p| p.per_channel));
    let mut tried: Vec<&str> = Vec::new();
    for kind in candidates {
        if tried.contains(&kind.id) {
            continue;
        }
        tried.push(kind.id);
        let per = each_channel(channels, |c| identify_as(kind, &|x| f(x, c)));
        if let Some(per) = per {
            return Some((kind, Params::from_channels(&per, shape)));
        }
    }
    same_kind.then(|| {
        let per: Vec<Vec<f64>> = found.into_iter().map(|(_, p)| p).collect();
        (first, Params::from_channels(&per, shape))
    })
}

/// `find` for every channel, in order, on every core when there are several; `None` when some
/// channel gives none.
fn each_channel<T: Send>(
    channels: usize,
    find: impl Fn(usize) -> Option<T> + Sync,
) -> Option<Vec<T>> {
    if channels > 1 {
        (0..channels).into_par_iter().map(&find).collect()
    } else {
        (0..channels).map(find).collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::catalog::get;

    /// A test chain: a scalar function built from ONNX-style pieces.
    type Chain = Box<dyn Fn(f64) -> f64>;
    fn kind(id: &str) -> &'static Kind {
        get(id).unwrap()
    }

    /// Identifies `kind` with `p` from its own reference and checks kind and parameters.
    fn roundtrip(id: &str, p: &[f64]) {
        let k = kind(id);
        let f = |x: f64| k.eval(x, p);
        let (found, q) = identify(&f).unwrap_or_else(|| panic!("{id} {p:?} not identified"));
        assert_eq!(found.id, id, "{id} {p:?} identified as {} {q:?}", found.id);
        assert_eq!(q.len(), p.len());
        for (a, b) in q.iter().zip(p) {
            assert!(
                (a - b).abs() <= 1e-6 * b.abs().max(1e-300),
                "{id}: {q:?} vs {p:?}"
            );
        }
    }

    #[test]
    fn every_kind_at_its_defaults_is_identified() {
        // The whole registry: each kind is found as itself, or as an earlier kind that computes
        // the same function (prelu as leaky_relu, celu(1) as elu), or not at all when its
        // defaults make it the identity (clip without bounds).
        for &k in all() {
            let p = k.defaults();
            let f = |x: f64| k.eval(x, &p);
            match identify(&f) {
                Some((found, q)) if found.id == k.id => {
                    for (a, b) in q.iter().zip(&p) {
                        assert!(
                            (a - b).abs() <= 1e-6 * b.abs().max(1e-300),
                            "{}: {q:?}",
                            k.id
                        );
                    }
                }
                Some((found, q)) => {
                    let pos = |x: &Kind| all().iter().position(|k| k.id == x.id);
                    assert!(pos(found) < pos(k), "{} found as {}", k.id, found.id);
                    assert!(matches(found, &f, &q, probe_points()), "{}", k.id);
                }
                None => assert!(
                    probe_points().iter().all(|&x| f(x) == x),
                    "{} at its defaults not identified",
                    k.id
                ),
            }
        }
    }

    #[test]
    fn every_kind_is_identified_with_its_parameters() {
        for (id, p) in [
            ("shrink", [0.5, 0.5]),
            ("shrink", [0.7, 0.0]),
            ("shrink", [1.5, 0.2]),
        ] {
            roundtrip(id, &p);
        }
        for p in [
            [-1.0, 1.0],
            [0.5, 2.0],
            [-f32::MAX as f64, 3.0],
            [-2.5, f32::MAX as f64],
        ] {
            roundtrip("clip", &p);
        }
        for a in [0.01, 0.2, 0.3, 2.0, -0.5] {
            roundtrip("leaky_relu", &[a]);
        }
        for a in [1.0, 0.5, 2.5, -0.5, 0.1f32 as f64] {
            roundtrip("thresholded_relu", &[a]);
        }
        for a in [1.0, 0.5, 2.0, 0.01] {
            roundtrip("elu", &[a]);
        }
        #[allow(clippy::excessive_precision)] // the ONNX defaults, digits as the spec writes them
        for p in [
            [1.67326319217681884765625, 1.05070102214813232421875],
            [1.6732632423543772, 1.0507009873554805],
            [1.5, 1.2],
        ] {
            roundtrip("selu", &p);
        }
        for a in [0.5, 2.0, 0.1, 30.0] {
            roundtrip("celu", &[a]);
        }
        for p in [
            [0.2, 0.5],
            [1.0 / 6.0, 0.5],
            [0.5, 0.2],
            [-0.3, 0.6],
            [40.0, 0.5],
        ] {
            roundtrip("hard_sigmoid", &p);
        }
        for b in [1.702, 0.25, 3.0, 20.0, 100.0, -1.0, 1.702f32 as f64] {
            roundtrip("swish", &[b]);
        }
    }

    #[test]
    fn overlapping_kinds_resolve_to_the_earlier_one() {
        let cases: [(&str, &[f64], &str); 8] = [
            ("leaky_relu", &[0.0], "relu"),
            ("thresholded_relu", &[0.0], "relu"),
            ("clip", &[0.0, f32::MAX as f64], "relu"),
            ("clip", &[0.0, 6.0], "relu6"),
            ("swish", &[1.0], "silu"),
            ("celu", &[1.0], "elu"),
            ("selu", &[1.3, 1.0], "elu"),
            ("hard_sigmoid", &[1.0, 0.0], "clip"),
        ];
        for (id, p, expected) in cases {
            let k = kind(id);
            let found = identify(&|x| k.eval(x, p)).map(|(k, _)| k.id);
            assert_eq!(found, Some(expected), "{id} {p:?}");
        }
        // A scalar PRelu is a LeakyRelu; the graph (a slope tensor) tells them apart.
        let prelu = kind("prelu");
        let (k, q) = identify(&|x| prelu.eval(x, &[0.25])).unwrap();
        assert_eq!((k.id, q), ("leaky_relu", vec![0.25]));
    }

    #[test]
    fn silu_needs_beta_to_round_to_one_in_float32() {
        let swish = kind("swish");
        let next = f64::from(1.0f32.next_up());
        assert_eq!(identify(&|x| swish.eval(x, &[next])).unwrap().0.id, "swish");
        assert_eq!(
            identify(&|x| swish.eval(x, &[1.0 + 1e-12])).unwrap().0.id,
            "silu"
        );
        assert_eq!(
            identify(&|x| swish.eval(x, &[1.00001])).unwrap().0.id,
            "swish"
        );
    }

    #[test]
    fn near_misses_are_not_identified_as_the_kind_they_resemble() {
        let wide_gelu = |x: f64| 0.5 * x * (1.0 + libm::erf(x / 1.3));
        assert_ne!(identify(&wide_gelu).map(|(k, _)| k.id), Some("gelu"));
        let hs = kind("hard_sigmoid");
        let x_hs02 = |x: f64| x * hs.eval(x, &[0.2, 0.5]);
        assert_ne!(identify(&x_hs02).map(|(k, _)| k.id), Some("hard_swish"));
        assert!(
            identify(&|x: f64| x).is_none(),
            "identity is not an activation"
        );
        assert!(identify(&|x: f64| 0.3 * x + 1.0).is_none());
        assert!(identify(&|_| 0.5).is_none());
    }

    #[test]
    fn tolerance_separates_the_closest_pairs() {
        let probes = probe_points();
        let check = |a: &str, pa: &[f64], b: &str, pb: &[f64]| {
            let (ka, kb) = (kind(a), kind(b));
            assert!(
                !matches(kb, &|x| ka.eval(x, pa), pb, probes),
                "{a} fits {b}"
            );
            assert!(
                !matches(ka, &|x| kb.eval(x, pb), pa, probes),
                "{b} fits {a}"
            );
        };
        check("gelu", &[], "gelu_tanh", &[]);
        check("silu", &[], "hard_swish", &[]);
        check(
            "hard_sigmoid",
            &[0.2, 0.5],
            "hard_sigmoid",
            &[1.0 / 6.0, 0.5],
        );
    }

    /// Worst `|f - g| / (1 + |g|)` over the probes.
    fn worst(f: &dyn Fn(f64) -> f64, k: &Kind, p: &[f64]) -> f64 {
        probe_points()
            .iter()
            .map(|&x| (f(x) - k.eval(x, p)).abs() / (1.0 + k.eval(x, p).abs()))
            .fold(0.0, f64::max)
    }

    fn r32(v: f64) -> f64 {
        f64::from(v as f32)
    }

    #[test]
    fn chains_with_float32_constants_are_identified() {
        let sqrt2 = r32(std::f64::consts::SQRT_2);
        let c = r32((2.0 / std::f64::consts::PI).sqrt());
        let k3 = r32(0.044715);
        let sixth = r32(0.16666667163372); // ONNX HardSwish function body
        // ONNX function bodies (ONNX Gelu, HardSwish, Softplus, Mish schemas) and
        // exporter decompositions, evaluated in f64 with float32 constants.
        let chains: [(&str, Chain, f64); 7] = [
            (
                "gelu",
                Box::new(move |x| 0.5 * x * (1.0 + libm::erf(x / sqrt2))),
                1e-7,
            ),
            (
                "gelu_tanh",
                Box::new(move |x| 0.5 * x * (1.0 + (c * (x + k3 * x * x * x)).tanh())),
                1e-7,
            ),
            (
                "hard_swish",
                Box::new(move |x| x * (sixth * x + 0.5).clamp(0.0, 1.0)),
                1e-7,
            ),
            ("softplus", Box::new(|x: f64| (x.exp() + 1.0).ln()), 1e-7),
            (
                "mish",
                Box::new(|x: f64| x * (1.0 + x.exp()).ln().tanh()),
                1e-7,
            ),
            ("silu", Box::new(|x: f64| x / (1.0 + (-x).exp())), 1e-7),
            ("sigmoid", Box::new(|x: f64| 1.0 / (1.0 + (-x).exp())), 1e-7),
        ];
        for (id, f, bound) in &chains {
            let (k, p) = identify(f.as_ref()).unwrap_or_else(|| panic!("{id}"));
            assert_eq!(k.id, *id);
            assert!(worst(f.as_ref(), k, &p) < *bound, "{id}");
        }
        // Recovered parameters are reported at full precision, not snapped to a default.
        let b = r32(1.702);
        let (k, p) = identify(&|x: f64| x / (1.0 + (-b * x).exp())).unwrap();
        assert_eq!(k.id, "swish");
        assert!((p[0] - b).abs() <= 1e-15 * b && p[0] != 1.702, "{p:?}");
        let (a, g) = (r32(1.6732632423543772), r32(1.0507009873554805));
        let selu = move |x: f64| {
            if x > 0.0 {
                g * x
            } else {
                g * (a * x.exp() - a)
            }
        };
        let (k, p) = identify(&selu).unwrap();
        assert_eq!(k.id, "selu");
        assert!(
            (p[0] - a).abs() < 1e-14 && (p[1] - g).abs() < 1e-15,
            "{p:?}"
        );
    }

    #[test]
    fn chains_evaluated_in_float32_are_identified() {
        let sqrt2 = std::f32::consts::SQRT_2;
        let chains: [(&str, Chain); 4] = [
            (
                "gelu",
                Box::new(move |x| {
                    let x = x as f32;
                    f64::from(0.5 * x * (1.0 + libm::erff(x / sqrt2)))
                }),
            ),
            (
                "mish",
                Box::new(|x| {
                    let x = x as f32;
                    f64::from(x * (1.0 + x.exp()).ln().tanh())
                }),
            ),
            (
                "hard_swish",
                Box::new(|x| {
                    let x = x as f32;
                    f64::from(x * (x / 6.0 + 0.5).clamp(0.0, 1.0))
                }),
            ),
            (
                "tanh",
                Box::new(|x| {
                    let x = x as f32;
                    f64::from(2.0 / (1.0 + (-2.0 * x).exp()) - 1.0)
                }),
            ),
        ];
        for (id, f) in &chains {
            let found = identify(f.as_ref()).map(|(k, _)| k.id);
            assert_eq!(found, Some(*id));
            let k = kind(id);
            assert!(worst(f.as_ref(), k, &[]) < MATCH_RTOL / 2.0, "{id}");
        }
        // Float32 evaluation leaves beta recoverable only to ~2e-7 (f(1) carries float32
        // rounding), more than float32 rounding of 1: a SiLU computed in float32 shows as swish.
        let silu32 = |x: f64| {
            let x = x as f32;
            f64::from(x / (1.0 + (-x).exp()))
        };
        let (k, p) = identify(&silu32).unwrap();
        assert_eq!(k.id, "swish");
        assert!((p[0] - 1.0).abs() < 1e-6, "{p:?}");
    }
}
