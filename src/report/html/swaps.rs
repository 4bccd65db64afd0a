//! The swapped kinds of a report: sites grouped by (original kind and parameters, new kind and
//! parameters, fit), and for each group the two activations and their difference sampled over
//! the inputs the sites saw, from the catalogue's f64 reference formulas ([`Kind::eval`]).
//!
//! The worst-case point is the catalogue's own ([`substitute::max_abs_error`] over the observed
//! range, the computation behind a site's `bound_over_range` and `bound_at`), so the plot and
//! the figures agree. Per-channel parameters are plotted for one channel: the one with the
//! largest worst-case error over the range, as the drift report's bound takes it.
//!
//! A site replaced by a fitted form of its own kind is plotted against that kind's reference:
//! the fitted function of the plotted channel ([`Pwl::eval`]), its knots, and an x range that
//! holds both the inputs seen and the fitting range, with a tenth of the latter beyond each end
//! so that the tails show. Its worst case is the fit's error over the observed range
//! ([`Fitted::error_over`], as the drift report's bound).

use crate::catalog::fit::{FitBound, FitRange, Fitted, Pwl};
use crate::catalog::substitute::{self, ErrorBound};
use crate::catalog::{Kind, Params};
use crate::measure::result::SiteDrift;

/// Points per curve, evenly spaced over the plotted range, ends included.
pub const CURVE_POINTS: usize = 241;

/// How far a fitted form's plot reaches beyond its fitting range, as a share of the range.
const TAIL_SHARE: f64 = 0.1;

/// One swapped pair of (kind, parameters) and the sites it was applied to.
pub struct Swap<'a> {
    /// The sites, in report order; the first one names the swap.
    pub sites: Vec<&'a SiteDrift>,
    /// The fitted form the sites were replaced by, when they were.
    pub fit: Option<&'a Fitted>,
    /// The curves, or why there are none.
    pub curves: Result<Curves, String>,
}

/// The sampled activations of a swap.
pub struct Curves {
    pub kind_a: &'static Kind,
    pub kind_b: &'static Kind,
    /// Parameter values plotted, in each kind's order.
    pub params_a: Vec<f64>,
    pub params_b: Vec<f64>,
    /// The channel plotted, of how many, when a parameter is per channel.
    pub channel: Option<(usize, usize)>,
    /// Smallest and largest input seen at any of the sites.
    pub observed: (f64, f64),
    /// The 1st to 99th percentile band (lowest p01 to highest p99 over the sites).
    pub band: (f64, f64),
    /// The x range drawn: the observed range, widened when it is (nearly) a point.
    pub plotted: (f64, f64),
    pub x: Vec<f64>,
    pub a: Vec<f64>,
    pub b: Vec<f64>,
    /// `|a - b|` at each x.
    pub err: Vec<f64>,
    /// The catalogue's worst case over the observed range.
    pub worst: ErrorBound,
    /// The plotted channel's fitted function, for a fitted form (`b` is its values).
    pub fit: Option<FitCurve>,
}

/// The fitted function of the plotted channel, and its fit.
pub struct FitCurve {
    pub pwl: Pwl,
    pub range: FitRange,
    /// The site's bounds (worst channel): in the fitting range and over the real line.
    pub bound: FitBound,
}

impl FitCurve {
    /// The knots and the fitted function's value at each.
    pub fn knots(&self) -> impl Iterator<Item = (f64, f64)> + '_ {
        self.pwl.knots.iter().map(|&t| (t, self.pwl.eval(t)))
    }
}

impl Curves {
    /// The replacement at `x`: the fitted function, or `kind_b`'s reference.
    pub fn replacement(&self, x: f64) -> f64 {
        match &self.fit {
            Some(f) => f.pwl.eval(x),
            None => self.kind_b.eval(x, &self.params_b),
        }
    }
}

/// The report's swaps: sites whose kind or parameters changed or that got a fitted form (given
/// beside each site), grouped, in first-seen order.
pub fn swaps<'a>(sites: &[(&'a SiteDrift, Option<&'a Fitted>)]) -> Vec<Swap<'a>> {
    let mut groups: Vec<(Vec<&'a SiteDrift>, Option<&'a Fitted>)> = Vec::new();
    for &(s, fit) in sites {
        if fit.is_none() && s.kind_a.id == s.kind_b.id && s.params_a == s.params_b {
            continue;
        }
        match groups
            .iter_mut()
            .find(|(g, f)| same_swap(g[0], s) && same_fit(*f, fit))
        {
            Some((g, _)) => g.push(s),
            None => groups.push((vec![s], fit)),
        }
    }
    groups
        .into_iter()
        .map(|(sites, fit)| Swap {
            curves: curves(&sites, fit),
            sites,
            fit,
        })
        .collect()
}

fn same_swap(x: &SiteDrift, y: &SiteDrift) -> bool {
    x.kind_a.id == y.kind_a.id
        && x.params_a == y.params_a
        && x.kind_b.id == y.kind_b.id
        && x.params_b == y.params_b
}

/// Both without a fit, or with the same fitted functions over the same range.
fn same_fit(x: Option<&Fitted>, y: Option<&Fitted>) -> bool {
    match (x, y) {
        (None, None) => true,
        (Some(x), Some(y)) => x.range == y.range && x.channels == y.channels,
        _ => false,
    }
}

fn curves(sites: &[&SiteDrift], fit: Option<&Fitted>) -> Result<Curves, String> {
    let s = sites[0];
    let (kind_a, kind_b) = (s.kind_a, s.kind_b);
    let (Some(pa), Some(pb)) = (&s.params_a, &s.params_b) else {
        return Err("a parameter is only known at run time".into());
    };
    let ranges: Vec<_> = sites.iter().filter_map(|s| s.input_range).collect();
    if ranges.is_empty() {
        return Err("no input range was observed at these sites".into());
    }
    let fold = |f: fn(&crate::measure::range::InputRange) -> f64, pick: fn(f64, f64) -> f64| {
        ranges.iter().map(f).reduce(pick).unwrap_or(f64::NAN)
    };
    let observed = (fold(|r| r.min, f64::min), fold(|r| r.max, f64::max));
    let band = (fold(|r| r.p01, f64::min), fold(|r| r.p99, f64::max));
    let (worst, c, fit, plotted) = match fit {
        Some(f) => {
            let (c, worst) = f.worst_channel_over(observed.0, observed.1);
            let curve = FitCurve {
                pwl: f.channels[c].clone(),
                range: f.range,
                bound: f.bound,
            };
            let plotted = around_fit(widen(observed), f.range);
            (worst, c, Some(curve), plotted)
        }
        None => {
            let (worst, c) = substitute::max_abs_error_per_channel(
                (kind_a, pa),
                (kind_b, pb),
                observed.0,
                observed.1,
            )?;
            (worst, c, None, widen(observed))
        }
    };
    let channels = pa.channels().max(pb.channels());
    let (params_a, params_b) = (channel(pa, c), channel(pb, c));
    let x: Vec<f64> = (0..CURVE_POINTS)
        .map(|i| plotted.0 + (plotted.1 - plotted.0) * i as f64 / (CURVE_POINTS - 1) as f64)
        .collect();
    let a: Vec<f64> = x.iter().map(|&x| kind_a.eval(x, &params_a)).collect();
    let mut curves = Curves {
        kind_a,
        kind_b,
        params_a,
        params_b,
        channel: (channels > 1).then_some((c, channels)),
        observed,
        band,
        plotted,
        x,
        a,
        b: Vec::new(),
        err: Vec::new(),
        worst,
        fit,
    };
    curves.b = curves.x.iter().map(|&x| curves.replacement(x)).collect();
    curves.err = curves
        .a
        .iter()
        .zip(&curves.b)
        .map(|(a, b)| (a - b).abs())
        .collect();
    Ok(curves)
}

/// The plotted range of a fitted form: `plotted` and the fitting range, with
/// [`TAIL_SHARE`] of the fitting range beyond each of its ends.
fn around_fit(plotted: (f64, f64), range: FitRange) -> (f64, f64) {
    let tail = TAIL_SHARE * (range.hi - range.lo);
    (
        plotted.0.min(range.lo - tail),
        plotted.1.max(range.hi + tail),
    )
}

/// Channel `c`'s parameters (a side without per-channel values has one channel).
fn channel(p: &Params, c: usize) -> Vec<f64> {
    p.channel(c.min(p.channels() - 1))
}

/// The observed range, or around it when it is (nearly) one point: by a quarter of its size
/// each way, and at least by 1.
fn widen((lo, hi): (f64, f64)) -> (f64, f64) {
    let centre = (lo + hi) / 2.0;
    let least = 1e-6 * centre.abs().max(1.0);
    if hi - lo >= least {
        return (lo, hi);
    }
    let w = (0.25 * centre.abs()).max(1.0);
    (centre - w, centre + w)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::measure::range::InputRange;

    fn site(id: &str, from: &str, to: &str, range: (f64, f64)) -> SiteDrift {
        SiteDrift {
            id_a: id.into(),
            id_b: id.into(),
            output: format!("{id}.out"),
            graph: "main".into(),
            kind_a: crate::catalog::get(from).unwrap(),
            params_a: Some(Params::scalars(
                &crate::catalog::get(from).unwrap().defaults(),
            )),
            ops_a: vec![],
            kind_b: crate::catalog::get(to).unwrap(),
            params_b: Some(Params::scalars(
                &crate::catalog::get(to).unwrap().defaults(),
            )),
            ops_b: vec![],
            local: None,
            local_basis: None,
            propagated: None,
            isolation_max_abs: None,
            input_range: Some(InputRange {
                min: range.0,
                max: range.1,
                p01: range.0,
                p99: range.1,
                nonfinite: 0,
            }),
            bound_over_range: None,
            bound_at: None,
            latency: None,
            notes: vec![],
        }
    }

    #[test]
    fn sites_of_one_swap_share_a_plot_over_all_their_inputs() {
        let sites = [
            site("s1", "silu", "hard_swish", (-4.0, 1.0)),
            site("s2", "relu6", "relu6", (-1.0, 1.0)),
            site("s3", "silu", "hard_swish", (-1.0, 5.0)),
        ];
        let refs: Vec<_> = sites.iter().map(|s| (s, None)).collect();
        let swaps = swaps(&refs);
        assert_eq!(swaps.len(), 1, "relu6 -> relu6 swaps nothing");
        let ids: Vec<&str> = swaps[0].sites.iter().map(|s| s.id_a.as_str()).collect();
        assert_eq!(ids, ["s1", "s3"]);
        let c = swaps[0].curves.as_ref().unwrap();
        assert_eq!((c.observed, c.plotted), ((-4.0, 5.0), (-4.0, 5.0)));
        assert_eq!(
            (c.x.len(), c.a.len(), c.err.len()),
            (CURVE_POINTS, CURVE_POINTS, CURVE_POINTS)
        );
        // SiLU (Elfwing et al. 2018) against hard-swish (Howard et al. 2019) differs most at
        // x = +-3, by 3 / (1 + e^3).
        assert!((c.worst.value - 3.0 / (1.0 + 3f64.exp())).abs() < 1e-12);
        assert!((c.worst.at.abs() - 3.0).abs() < 1e-6);
    }

    #[test]
    fn a_single_input_value_is_plotted_around_it() {
        let sites = [site("s1", "silu", "hard_swish", (2.0, 2.0))];
        let swaps = swaps(&[(&sites[0], None)]);
        let c = swaps[0].curves.as_ref().unwrap();
        assert_eq!(c.plotted, (1.0, 3.0));
        // The worst case stays that of the inputs seen: the one point x = 2, where
        // silu(2) = 2 sigmoid(2) and hard_swish(2) = 2 * 5 / 6.
        let expected = (2.0 * 5.0 / 6.0 - 2.0 / (1.0 + (-2f64).exp())).abs();
        assert!(
            (c.worst.value - expected).abs() < 1e-12,
            "{}",
            c.worst.value
        );
        assert_eq!(c.worst.at, 2.0);
    }

    #[test]
    fn a_fitted_site_is_plotted_against_its_kind_over_its_fitting_range() {
        use crate::catalog::fit;
        use crate::onnx::proto::tensor_proto::DataType;
        let silu = crate::catalog::get("silu").unwrap();
        let range = fit::FitRange::new(-8.0, 8.0).unwrap();
        let f = fit::fit(silu, &Params::scalars(&[]), range, 8, DataType::Float).unwrap();
        let sites = [
            site("s1", "silu", "silu", (-4.0, 5.0)),
            site("s2", "silu", "silu", (-1.0, 1.0)),
        ];
        let swaps = swaps(&[(&sites[0], Some(&f)), (&sites[1], None)]);
        assert_eq!(swaps.len(), 1, "silu -> silu without a fit swaps nothing");
        let c = swaps[0].curves.as_ref().unwrap();
        // The fitting range and a tenth of it beyond each end.
        assert!((c.plotted.0 + 9.6).abs() < 1e-12 && (c.plotted.1 - 9.6).abs() < 1e-12);
        let fc = c.fit.as_ref().unwrap();
        let knots: Vec<(f64, f64)> = fc.knots().collect();
        assert_eq!(knots.len(), 9);
        assert!(
            knots.iter().all(|&(t, _)| -8.0 < t && t < 8.0),
            "knots inside the range"
        );
        // The error curve is |silu - fitted|, within the fit's bound inside its range.
        for ((&x, &e), &b) in c.x.iter().zip(&c.err).zip(&c.b) {
            assert_eq!(b, f.eval(0, x));
            if (-8.0..=8.0).contains(&x) {
                assert!(e <= f.bound.in_range.value, "{e} at {x}");
            }
        }
        // The worst case is the fit's error over the inputs seen, as the drift report's.
        assert_eq!(c.worst, f.error_over(-4.0, 5.0));
    }

    #[test]
    fn a_point_range_is_widened() {
        assert_eq!(widen((-3.0, 4.0)), (-3.0, 4.0));
        assert_eq!(widen((2.0, 2.0)), (1.0, 3.0));
        assert_eq!(widen((-100.0, -100.0)), (-125.0, -75.0));
    }
}
