//! The swapped kinds of a report: sites grouped by (original kind and parameters, new kind and
//! parameters), and for each group the two activations and their difference sampled over the
//! inputs the sites saw, from the catalogue's f64 reference formulas ([`Kind::eval`]).
//!
//! The worst-case point is the catalogue's own ([`substitute::max_abs_error`] over the observed
//! range, the computation behind a site's `bound_over_range` and `bound_at`), so the plot and
//! the figures agree. Per-channel parameters are plotted for one channel: the one with the
//! largest worst-case error over the range, as the drift report's bound takes it.

use crate::catalog::substitute::{self, ErrorBound};
use crate::catalog::{Kind, Params};
use crate::measure::result::SiteDrift;

/// Points per curve, evenly spaced over the plotted range, ends included.
pub const CURVE_POINTS: usize = 241;

/// One swapped pair of (kind, parameters) and the sites it was applied to.
pub struct Swap<'a> {
    /// The sites, in report order; the first one names the swap.
    pub sites: Vec<&'a SiteDrift>,
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
}

/// The report's swaps: sites whose kind or parameters changed, grouped, in first-seen order.
pub fn swaps<'a>(sites: &[&'a SiteDrift]) -> Vec<Swap<'a>> {
    let mut groups: Vec<Vec<&'a SiteDrift>> = Vec::new();
    for &s in sites {
        if s.kind_a.id == s.kind_b.id && s.params_a == s.params_b {
            continue;
        }
        match groups.iter_mut().find(|g| same_swap(g[0], s)) {
            Some(g) => g.push(s),
            None => groups.push(vec![s]),
        }
    }
    groups
        .into_iter()
        .map(|sites| Swap {
            curves: curves(&sites),
            sites,
        })
        .collect()
}

fn same_swap(x: &SiteDrift, y: &SiteDrift) -> bool {
    x.kind_a.id == y.kind_a.id
        && x.params_a == y.params_a
        && x.kind_b.id == y.kind_b.id
        && x.params_b == y.params_b
}

fn curves(sites: &[&SiteDrift]) -> Result<Curves, String> {
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
    let (worst, c) =
        substitute::max_abs_error_per_channel((kind_a, pa), (kind_b, pb), observed.0, observed.1)?;
    let channels = pa.channels().max(pb.channels());
    let (params_a, params_b) = (channel(pa, c), channel(pb, c));
    let plotted = widen(observed);
    let x: Vec<f64> = (0..CURVE_POINTS)
        .map(|i| plotted.0 + (plotted.1 - plotted.0) * i as f64 / (CURVE_POINTS - 1) as f64)
        .collect();
    let a: Vec<f64> = x.iter().map(|&x| kind_a.eval(x, &params_a)).collect();
    let b: Vec<f64> = x.iter().map(|&x| kind_b.eval(x, &params_b)).collect();
    let err = a.iter().zip(&b).map(|(a, b)| (a - b).abs()).collect();
    Ok(Curves {
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
        b,
        err,
        worst,
    })
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
        let refs: Vec<&SiteDrift> = sites.iter().collect();
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
        let swaps = swaps(&[&sites[0]]);
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
    fn a_point_range_is_widened() {
        assert_eq!(widen((-3.0, 4.0)), (-3.0, 4.0));
        assert_eq!(widen((2.0, 2.0)), (1.0, 3.0));
        assert_eq!(widen((-100.0, -100.0)), (-125.0, -75.0));
    }
}
