//! Approximation substitutions: named rules that replace one kind by another, each with a
//! computed worst-case error.
//!
//! Rules are data in one table-aligned list ([`BUILT_IN`]) and are validated when the table is
//! built ([`RuleTable::new`]): a rule naming an unknown kind, or giving the target the wrong
//! number of parameters, is an error then, not when the planner uses it.
//!
//! The hard form of x * sigmoid(beta x) keeps the slope: hard_swish with the same beta,
//! x * HardSigmoid(x; beta / 6, 1/2) (`swish-to-hard-swish`), whose error is the SiLU's divided by
//! |beta|.

use std::sync::OnceLock;

use super::get;
use super::kind::{Kind, Scale};
use super::numeric::same_f32;
use super::params::Params;

mod grid;
mod memo;

/// How a rule sets the target kind's parameters.
#[derive(Debug, Clone, Copy)]
pub enum ParamMap {
    /// These values, in the target kind's parameter order.
    Fixed(&'static [f64]),
    /// Computed from the source parameters; the map may refuse.
    Guarded(&'static Guard),
}

/// A parameter map that refuses when no sound target parameters exist.
#[derive(Debug)]
pub struct Guard {
    /// Number of target parameters the map returns.
    pub arity: usize,
    pub map: fn(from: &[f64]) -> Option<Vec<f64>>,
    /// When and why the map refuses.
    pub refuses: &'static str,
}

/// A rule as written in the table: kinds by id, `"*"` for any kind but the target.
#[derive(Debug, Clone, Copy)]
pub struct RuleSpec {
    pub name: &'static str,
    pub from: &'static str,
    pub to: &'static str,
    pub params: ParamMap,
}

/// Writes a [`RuleSpec`]: `rule!("name"; from => to)`, `rule!("name"; from => to [p, ...])`,
/// `rule!("name"; from => to if GUARD)`; `*` as `from` means any kind.
macro_rules! rule {
    ($name:literal; $from:tt => $to:ident) => {
        rule!($name; $from => $to [])
    };
    ($name:literal; $from:tt => $to:ident [$($p:expr),* $(,)?]) => {
        RuleSpec {
            name: $name,
            from: stringify!($from),
            to: stringify!($to),
            params: ParamMap::Fixed(&[$($p),*]),
        }
    };
    ($name:literal; $from:tt => $to:ident if $guard:ident) => {
        RuleSpec {
            name: $name,
            from: stringify!($from),
            to: stringify!($to),
            params: ParamMap::Guarded(&$guard),
        }
    };
}

#[rustfmt::skip]
/// The built-in rules. Bounds over the real line are computed, see [`max_abs_error`].
pub const BUILT_IN: &[RuleSpec] = &[
    rule!("silu-to-hard-swish";   silu       => hard_swish [1.0]),
    rule!("hard-swish-to-silu";   hard_swish => silu if BETA_IS_ONE),
    rule!("swish-to-hard-swish";  swish      => hard_swish if SAME_BETA),
    rule!("gelu-to-tanh";         gelu       => gelu_tanh),
    rule!("gelu-tanh-to-erf";     gelu_tanh  => gelu),
    rule!("gelu-to-sigmoid-1702"; gelu       => swish [1.702]),
    rule!("sigmoid-to-hard";      sigmoid    => hard_sigmoid [1.0 / 6.0, 0.5]),
    rule!("sigmoid-to-hard-0.2";  sigmoid    => hard_sigmoid [0.2, 0.5]),
    rule!("tanh-to-hard-tanh";    tanh       => clip [-1.0, 1.0]),
    rule!("mish-to-silu";         mish       => silu),
    rule!("mish-to-hard-swish";   mish       => hard_swish [1.0]),
    rule!("celu-to-elu";          celu       => elu if ALPHA_IS_ONE),
    rule!("any-to-relu";          *          => relu),
];

/// hard_swish -> silu only where the hard-swish has the SiLU's slope.
pub static BETA_IS_ONE: Guard = Guard {
    arity: 0,
    map: |p| p.first().is_some_and(|&b| same_f32(b, 1.0)).then(Vec::new),
    refuses: "beta does not round to 1 in float32: silu has no slope",
};

/// swish -> hard_swish with the swish's own slope.
pub static SAME_BETA: Guard = Guard {
    arity: 1,
    map: |p| p.first().map(|&b| vec![b]),
    refuses: "never",
};

/// celu -> elu only where they coincide.
pub static ALPHA_IS_ONE: Guard = Guard {
    arity: 1,
    map: |p| {
        p.first()
            .is_some_and(|&a| same_f32(a, 1.0))
            .then(|| vec![1.0])
    },
    refuses: "alpha does not round to 1 in float32: celu(x; alpha) = alpha * elu(x / alpha; 1) \
              is an elu only for alpha = 1",
};

/// A validated rule.
#[derive(Debug)]
pub struct Rule {
    pub name: &'static str,
    /// `None`: any kind but the target.
    pub from: Option<&'static Kind>,
    pub to: &'static Kind,
    pub params: ParamMap,
}

impl Rule {
    /// Whether the rule can replace sites of `kind`.
    pub fn applies_to(&self, kind: &Kind) -> bool {
        match self.from {
            Some(from) => from.id == kind.id,
            None => kind.id != self.to.id,
        }
    }

    /// The target parameters for a site with `from_params`; `None` when the rule refuses.
    pub fn target_params(&self, from_params: &[f64]) -> Option<Vec<f64>> {
        match self.params {
            ParamMap::Fixed(p) => Some(p.to_vec()),
            ParamMap::Guarded(g) => (g.map)(from_params).filter(|p| p.len() == g.arity),
        }
    }

    /// Worst-case |from - to| over the real line for a site of `from` with `from_params`;
    /// `None` when the rule does not apply or refuses.
    pub fn error_over_reals(&self, from: &Kind, from_params: &[f64]) -> Option<ErrorBound> {
        if !self.applies_to(from) {
            return None;
        }
        let to_params = self.target_params(from_params)?;
        Some(max_abs_error(
            (from, from_params),
            (self.to, &to_params),
            f64::NEG_INFINITY,
            f64::INFINITY,
        ))
    }
}

/// Why a rule table cannot be built.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RuleError {
    #[error("rule '{rule}': unknown kind '{kind}'")]
    UnknownKind { rule: String, kind: String },
    #[error("rule '{rule}': {to} takes {expected} parameter(s), the rule gives {got}")]
    Arity {
        rule: String,
        to: String,
        expected: usize,
        got: usize,
    },
    #[error("rule '{rule}' is defined twice")]
    Duplicate { rule: String },
    #[error("rule '{rule}' replaces {kind} by itself")]
    SameKind { rule: String, kind: String },
    #[error("rule '{rule}': a rule for any kind needs fixed parameters")]
    GuardedWildcard { rule: String },
    #[error("rule name '{rule}' is not lower-case kebab-case")]
    BadName { rule: String },
}

/// A validated set of rules, in table order.
#[derive(Debug)]
pub struct RuleTable {
    rules: Vec<Rule>,
}

impl RuleTable {
    /// Validates every spec: well-formed unique name, known kinds, a target parameter count that
    /// matches the target kind (a guard is also run on the source kind's defaults to check it).
    pub fn new(specs: &[RuleSpec]) -> Result<Self, RuleError> {
        let mut rules: Vec<Rule> = Vec::with_capacity(specs.len());
        for spec in specs {
            let rule = || spec.name.to_string();
            let well_formed = !spec.name.is_empty()
                && spec
                    .name
                    .chars()
                    .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '-' || c == '.');
            if !well_formed {
                return Err(RuleError::BadName { rule: rule() });
            }
            if rules.iter().any(|r| r.name == spec.name) {
                return Err(RuleError::Duplicate { rule: rule() });
            }
            let kind = |id: &str| {
                get(id).ok_or_else(|| RuleError::UnknownKind {
                    rule: rule(),
                    kind: id.to_string(),
                })
            };
            let to = kind(spec.to)?;
            let from = match spec.from {
                "*" => None,
                id => Some(kind(id)?),
            };
            if from.is_some_and(|f| f.id == to.id) {
                return Err(RuleError::SameKind {
                    rule: rule(),
                    kind: to.id.to_string(),
                });
            }
            let arity = |got: usize| {
                if got == to.params.len() {
                    Ok(())
                } else {
                    Err(RuleError::Arity {
                        rule: rule(),
                        to: to.id.to_string(),
                        expected: to.params.len(),
                        got,
                    })
                }
            };
            match (spec.params, from) {
                (ParamMap::Fixed(p), _) => arity(p.len())?,
                (ParamMap::Guarded(_), None) => {
                    return Err(RuleError::GuardedWildcard { rule: rule() });
                }
                (ParamMap::Guarded(g), Some(from)) => {
                    arity(g.arity)?;
                    if let Some(p) = (g.map)(&from.defaults()) {
                        arity(p.len())?;
                    }
                }
            }
            rules.push(Rule {
                name: spec.name,
                from,
                to,
                params: spec.params,
            });
        }
        Ok(Self { rules })
    }

    pub fn rules(&self) -> &[Rule] {
        &self.rules
    }

    /// The rule called `name`.
    pub fn get(&self, name: &str) -> Option<&Rule> {
        self.rules.iter().find(|r| r.name == name)
    }

    /// The rules that can replace sites of `kind`, in table order.
    pub fn for_kind<'a>(&'a self, kind: &'a Kind) -> impl Iterator<Item = &'a Rule> + 'a {
        self.rules.iter().filter(move |r| r.applies_to(kind))
    }
}

/// The built-in rule table ([`BUILT_IN`]), validated once.
pub fn rules() -> &'static RuleTable {
    static TABLE: OnceLock<RuleTable> = OnceLock::new();
    TABLE.get_or_init(|| {
        RuleTable::new(BUILT_IN).unwrap_or_else(|e| panic!("built-in rule table: {e}"))
    })
}

/// A worst-case absolute error and where it occurs.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ErrorBound {
    /// sup |from(x) - to(x)|; `f64::INFINITY` when the error grows without bound.
    pub value: f64,
    /// Where the sup is reached; `+-f64::INFINITY` when it is only approached (or, for an
    /// unbounded error, reached) as x goes to that infinity. Of exactly equal maxima, the larger
    /// x; of two maxima equal up to rounding (mirror images), either.
    pub at: f64,
}

/// The farthest point sampled, standing in for infinity.
const FAR: f64 = 1e300;
/// An error above this at x = FAR grows without bound.
const UNBOUNDED: f64 = 1e100;
/// Local maxima of the sampled error refined by golden-section search.
const REFINED: usize = 8;
/// Relative differences up to this are rounding of the compared values (4 ulps).
const ROUNDING: f64 = 4.0 * f64::EPSILON;
/// A tail limit within this (times 1 + value) of the sup is where the sup is approached.
const TIE: f64 = 1e-12;

/// Worst-case `|from(x) - to(x)|` for x in `[lo, hi]`; either end may be infinite. NaN (value
/// and at) when a parameter list does not match its kind or an end is NaN.
///
/// Method: sample the error on a uniform grid (at least 4096 steps over a finite interval, and
/// step 1/64 on [-64, 64]), on a geometric grid (16 points per octave) beyond |x| = 64, at both
/// ends and at the breakpoints of both kinds (so kinks and jumps are evaluated exactly); then
/// refine the 8 largest local maxima of the samples by
/// golden-section search between their neighbours and keep the largest value. A difference
/// within 4 ulps of the larger of the two values counts as 0: it is rounding, not error.
///
/// Infinite sides: every catalogue kind is, far from 0, a constant or a linear function plus
/// a term that decays like e^-|x| or faster (softsign: like 1/|x|), so the difference of two
/// kinds is either asymptotically linear with non-zero slope (unbounded) or converges to a
/// finite limit. The error at x = +-1e300 tells which: above 1e100 (or not a number) it is
/// unbounded and the result is `INFINITY` at that side; otherwise it is the limit, and when the
/// limit is the sup (within 1e-12) the result's `at` is that infinity. On an infinite side the
/// geometric grid stops two octaves past the last octave whose error still differs from that
/// limit (see [`grid`]; an octave around each breakpoint stays dense), and one sample per
/// octave covers the rest out to 1e300: about 10,000 samples for the whole line instead of
/// 40,000, and never below the error sampled on the dense grid (checked in the tests).
///
/// A bound is computed once per process for the same kinds, parameters and ends (see [`memo`]):
/// a model's sites mostly share them. When both kinds rescale by the same factor `s` (see
/// [`Scale`]; swish to hard-swish with the same beta, or to ReLU at any beta),
/// `|f(x) - g(x)| = |f0(s x) - g0(s x)| / s`, so the bound is that of the two base functions
/// over `[s lo, s hi]`, divided by `s`: one computation serves every beta.
pub fn max_abs_error(from: (&Kind, &[f64]), to: (&Kind, &[f64]), lo: f64, hi: f64) -> ErrorBound {
    let (from, to, s) = match shared_scale(from, to) {
        Some((from_base, to_base, s)) => ((from.0, from_base), (to.0, to_base), s),
        None => (from, to, 1.0),
    };
    let (lo, hi) = (lo * s, hi * s);
    let base = memo::remembered(from, to, lo, hi, || computed(from, to, lo, hi));
    ErrorBound {
        value: base.value / s,
        at: base.at / s,
    }
}

/// The parameters to compute the bound with, for each side, and the factor `s` to divide it
/// by: both sides' base parameters when both rescale by the same finite, positive factor; one
/// side's base and the other's own parameters when the other holds at every scale.
fn shared_scale<'a>(
    from: (&'a Kind, &'a [f64]),
    to: (&'a Kind, &'a [f64]),
) -> Option<(&'a [f64], &'a [f64], f64)> {
    if from.1.len() != from.0.params.len() || to.1.len() != to.0.params.len() {
        return None;
    }
    let (from_base, to_base, s) = match (from.0.scale?, to.0.scale?) {
        (Scale::Factor { factor, base }, Scale::Factor { factor: g, base: b }) => {
            let s = factor(from.1);
            (g(to.1) == s).then_some((base, b, s))?
        }
        (Scale::Factor { factor, base }, Scale::Any) => (base, to.1, factor(from.1)),
        (Scale::Any, Scale::Factor { factor, base }) => (from.1, base, factor(to.1)),
        (Scale::Any, Scale::Any) => return None,
    };
    (s.is_finite() && s > 0.0).then_some((from_base, to_base, s))
}

/// [`max_abs_error`] computed afresh.
fn computed(from: (&Kind, &[f64]), to: (&Kind, &[f64]), lo: f64, hi: f64) -> ErrorBound {
    let arity_ok = from.1.len() == from.0.params.len() && to.1.len() == to.0.params.len();
    if !arity_ok || lo.is_nan() || hi.is_nan() {
        return ErrorBound {
            value: f64::NAN,
            at: f64::NAN,
        };
    }
    let (lo, hi) = if lo <= hi { (lo, hi) } else { (hi, lo) };
    let err = |x: f64| difference(from, to, x);
    let sides = [(hi == f64::INFINITY, FAR), (lo == f64::NEG_INFINITY, -FAR)];
    for (open, far) in sides {
        let e = err(far);
        if open && (e.is_nan() || e > UNBOUNDED) {
            return ErrorBound {
                value: f64::INFINITY,
                at: far.signum() * f64::INFINITY,
            };
        }
    }

    let mut breaks = (from.0.breakpoints)(from.1);
    breaks.extend((to.0.breakpoints)(to.1));
    let xs = grid::samples(lo.max(-FAR), hi.min(FAR), &breaks, &err);
    let ys: Vec<f64> = xs.iter().map(|&x| err(x)).collect();
    if let Some(i) = ys.iter().position(|y| y.is_nan()) {
        return ErrorBound {
            value: f64::INFINITY,
            at: xs[i],
        };
    }

    let mut best = ErrorBound {
        value: ys[0],
        at: xs[0],
    };
    let mut offer = |value: f64, at: f64| {
        if value > best.value || (value == best.value && at > best.at) {
            best = ErrorBound { value, at };
        }
    };
    for (&x, &y) in xs.iter().zip(&ys) {
        offer(y, x);
    }
    let last = xs.len() - 1;
    let mut peaks: Vec<usize> = (0..xs.len())
        .filter(|&i| (i == 0 || ys[i] >= ys[i - 1]) && (i == last || ys[i] >= ys[i + 1]))
        .collect();
    // The REFINED highest peaks, highest first and in sample order among equals: a full sort
    // would spend most of its time on the flat stretches, where every sample is a peak.
    let higher = |a: &usize, b: &usize| ys[*b].total_cmp(&ys[*a]).then(a.cmp(b));
    if peaks.len() > REFINED {
        peaks.select_nth_unstable_by(REFINED - 1, higher);
        peaks.truncate(REFINED);
    }
    peaks.sort_by(higher);
    for &i in &peaks {
        let (a, b) = (xs[i.saturating_sub(1)], xs[(i + 1).min(last)]);
        let (value, at) = golden_max(&err, a, b);
        offer(value, at);
    }

    if best.value == 0.0 {
        // No error anywhere: report the origin (or the nearest end) rather than a far sample.
        return ErrorBound {
            value: 0.0,
            at: 0.0f64.clamp(lo, hi),
        };
    }
    for (open, far) in sides {
        if open && err(far) >= best.value - TIE * (1.0 + best.value) {
            return ErrorBound {
                value: best.value.max(err(far)),
                at: far.signum() * f64::INFINITY,
            };
        }
    }
    best
}

/// Worst-case `|from - to|` over `[lo, hi]` for parameters that may be per channel: the worst
/// channel's bound (a NaN bound is the worst) and that channel. Channels with the same
/// parameters are computed once; the two sides must have the same channel count where both
/// have several.
pub fn max_abs_error_per_channel(
    from: (&Kind, &Params),
    to: (&Kind, &Params),
    lo: f64,
    hi: f64,
) -> Result<(ErrorBound, usize), String> {
    let (na, nb) = (from.1.channels(), to.1.channels());
    if na > 1 && nb > 1 && na != nb {
        return Err(format!(
            "{na} channels in the original, {nb} in the new site"
        ));
    }
    let mut seen: Vec<(Vec<f64>, Vec<f64>)> = Vec::new();
    let mut worst: Option<(ErrorBound, usize)> = None;
    for c in 0..na.max(nb) {
        let pa = from.1.channel(c.min(na - 1));
        let pb = to.1.channel(c.min(nb - 1));
        if seen.iter().any(|(x, y)| *x == pa && *y == pb) {
            continue;
        }
        let e = if from.0.id == to.0.id && pa == pb {
            ErrorBound { value: 0.0, at: lo }
        } else {
            max_abs_error((from.0, &pa), (to.0, &pb), lo, hi)
        };
        seen.push((pa, pb));
        if worst.is_none_or(|(w, _)| e.value > w.value || e.value.is_nan()) {
            worst = Some((e, c));
        }
    }
    worst.ok_or_else(|| "no channels".to_string())
}

/// |from(x) - to(x)|, with a difference within the rounding of the values themselves counted as
/// no error (it would otherwise reach 1e284 at x = 1e300 between two functions that both equal
/// x), and an overflow on one side only as an infinite error (x^2 against x is unbounded, not
/// within rounding of an infinite value).
fn difference(from: (&Kind, &[f64]), to: (&Kind, &[f64]), x: f64) -> f64 {
    let (a, b) = (from.0.eval(x, from.1), to.0.eval(x, to.1));
    if a == b {
        return 0.0;
    }
    if a.is_infinite() || b.is_infinite() {
        return f64::INFINITY;
    }
    let d = (a - b).abs();
    if d <= ROUNDING * a.abs().max(b.abs()) {
        0.0
    } else {
        d
    }
}

/// Golden-section search for the maximum of `g` on `[a, b]`: (value, at).
fn golden_max(g: &dyn Fn(f64) -> f64, a: f64, b: f64) -> (f64, f64) {
    let (value, at, _) = golden_search(g, a, b, &|_, _| false);
    (value, at)
}

/// Golden-section search for the maximum of `g` on `[a, b]`, to f64 resolution or until
/// `enough` holds for the bracket: the best probe's value, where it is, and the last bracket.
pub(crate) fn golden_search(
    g: &dyn Fn(f64) -> f64,
    mut a: f64,
    mut b: f64,
    enough: &dyn Fn(f64, f64) -> bool,
) -> (f64, f64, (f64, f64)) {
    const R: f64 = 0.618_033_988_749_894_9; // (sqrt 5 - 1) / 2
    let mut c = b - R * (b - a);
    let mut d = a + R * (b - a);
    let (mut gc, mut gd) = (g(c), g(d));
    for _ in 0..300 {
        if b - a <= 4.0 * f64::EPSILON * (a.abs() + b.abs()) || enough(a, b) {
            break;
        }
        if gc >= gd {
            (b, d, gd) = (d, c, gc);
            c = b - R * (b - a);
            gc = g(c);
        } else {
            (a, c, gc) = (c, d, gd);
            d = a + R * (b - a);
            gd = g(d);
        }
    }
    let (value, at) = if gc >= gd { (gc, c) } else { (gd, d) };
    (value, at, (a, b))
}

#[cfg(test)]
mod tests {
    use super::grid::{CORE, CORE_STEP, dense_tail};
    use super::*;

    fn spec(name: &'static str, from: &'static str, to: &'static str, p: ParamMap) -> RuleSpec {
        RuleSpec {
            name,
            from,
            to,
            params: p,
        }
    }

    #[test]
    fn built_in_table_is_valid() {
        let table = RuleTable::new(BUILT_IN).unwrap();
        assert_eq!(table.rules().len(), BUILT_IN.len());
        assert!(rules().get("gelu-to-tanh").is_some());
    }

    #[test]
    fn bad_rules_fail_when_the_table_is_built() {
        let err = |s: RuleSpec| RuleTable::new(&[s]).unwrap_err();
        assert!(matches!(
            err(spec("x", "swishy", "relu", ParamMap::Fixed(&[]))),
            RuleError::UnknownKind { kind, .. } if kind == "swishy"
        ));
        assert!(matches!(
            err(spec("x", "gelu", "sweesh", ParamMap::Fixed(&[]))),
            RuleError::UnknownKind { .. }
        ));
        assert_eq!(
            err(spec("x", "gelu", "swish", ParamMap::Fixed(&[]))),
            RuleError::Arity {
                rule: "x".into(),
                to: "swish".into(),
                expected: 1,
                got: 0
            }
        );
        assert!(matches!(
            err(spec(
                "x",
                "sigmoid",
                "hard_sigmoid",
                ParamMap::Fixed(&[0.2])
            )),
            RuleError::Arity {
                expected: 2,
                got: 1,
                ..
            }
        ));
        static LYING: Guard = Guard {
            arity: 1,
            map: |_| Some(vec![1.0, 2.0]),
            refuses: "never",
        };
        assert!(matches!(
            err(spec("x", "swish", "hard_swish", ParamMap::Guarded(&LYING))),
            RuleError::Arity {
                expected: 1,
                got: 2,
                ..
            }
        ));
        assert!(matches!(
            err(spec(
                "x",
                "*",
                "hard_swish",
                ParamMap::Guarded(&BETA_IS_ONE)
            )),
            RuleError::GuardedWildcard { .. }
        ));
        assert!(matches!(
            err(spec("x", "relu", "relu", ParamMap::Fixed(&[]))),
            RuleError::SameKind { .. }
        ));
        assert!(matches!(
            err(spec(
                "Gelu To Tanh",
                "gelu",
                "gelu_tanh",
                ParamMap::Fixed(&[])
            )),
            RuleError::BadName { .. }
        ));
        let twice = spec("a", "gelu", "gelu_tanh", ParamMap::Fixed(&[]));
        assert!(matches!(
            RuleTable::new(&[twice, twice]).unwrap_err(),
            RuleError::Duplicate { .. }
        ));
    }

    #[test]
    fn guards_refuse_unsound_parameters() {
        let table = rules();
        let swish = get("swish").unwrap();
        let r = table.get("swish-to-hard-swish").unwrap();
        assert_eq!(r.target_params(&[1.0]), Some(vec![1.0]));
        assert_eq!(r.target_params(&[1.702]), Some(vec![1.702]));
        // swish(x; b) - hard_swish(x; b) = (silu(bx) - hard_swish(bx)) / b: the SiLU bound
        // 3 / (1 + e^3) (Howard et al. 2019 against Elfwing et al. 2017) divided by b.
        let e = r.error_over_reals(swish, &[1.702]).unwrap();
        let want = 3.0 / (1.0 + 3f64.exp()) / 1.702;
        assert!((e.value - want).abs() <= 1e-12 * want, "{e:?}");
        let back = table.get("hard-swish-to-silu").unwrap();
        assert_eq!(back.target_params(&[1.702]), None);
        let r = table.get("celu-to-elu").unwrap();
        assert_eq!(r.target_params(&[1.0]), Some(vec![1.0]));
        assert_eq!(r.target_params(&[2.0]), None);
        let celu = get("celu").unwrap();
        assert!(r.error_over_reals(celu, &[1.0]).unwrap().value < 1e-15);
    }

    #[test]
    fn wildcard_applies_to_every_other_kind() {
        let any = rules().get("any-to-relu").unwrap();
        let relu = get("relu").unwrap();
        assert!(!any.applies_to(relu));
        assert!(
            super::super::all()
                .iter()
                .filter(|k| k.id != "relu")
                .all(|k| any.applies_to(k))
        );
    }

    /// The largest error sampled on the grid this bound used before its tails stopped where
    /// the error settles: step 1/64 on [-64, 64], 16 points per octave from 64 out to 1e300 on
    /// both sides, and the breakpoints.
    fn densely_sampled(err: &dyn Fn(f64) -> f64, breaks: &[f64]) -> f64 {
        let core = (0..=(2.0 * CORE / CORE_STEP) as usize).map(|i| -CORE + i as f64 * CORE_STEP);
        let tail = dense_tail(CORE, FAR).flat_map(|t| [t, -t]);
        core.chain(tail)
            .chain(breaks.iter().copied())
            .chain([FAR, -FAR])
            .map(err)
            .fold(0.0, f64::max)
    }

    #[test]
    fn bounds_over_the_line_are_never_below_dense_sampling() {
        // Every rule from every kind, at the kind's defaults and with all its parameters scaled
        // far both ways (slopes of 1e-9 move a swish's turn out to 1e9); the reference is the
        // error itself, evaluated on the dense grid.
        let mut checked = 0;
        for &from in super::super::all() {
            for scale in [1.0, 1e-3, 1e3, 1e-9] {
                let p: Vec<f64> = from.defaults().iter().map(|v| v * scale).collect();
                if scale != 1.0 && p.is_empty() {
                    continue;
                }
                for rule in rules().for_kind(from) {
                    let Some(q) = rule.target_params(&p) else {
                        continue;
                    };
                    let bound =
                        computed((from, &p), (rule.to, &q), f64::NEG_INFINITY, f64::INFINITY);
                    if !bound.value.is_finite() {
                        continue;
                    }
                    let err = |x: f64| difference((from, &p), (rule.to, &q), x);
                    let mut breaks = (from.breakpoints)(&p);
                    breaks.extend((rule.to.breakpoints)(&q));
                    let dense = densely_sampled(&err, &breaks);
                    assert!(
                        bound.value >= dense * (1.0 - 1e-12),
                        "{} on {} {p:?}: {bound:?} below the dense grid's {dense}",
                        rule.name,
                        from.id
                    );
                    checked += 1;
                }
            }
        }
        assert!(checked >= 40, "{checked} bounds checked");
    }

    #[test]
    fn finite_interval_and_exact_kinks() {
        let (relu, lrelu) = (get("relu").unwrap(), get("leaky_relu").unwrap());
        // |relu - leaky_relu(0.1)| = 0.1 |x| on x < 0: the worst point of [-5, 2] is x = -5.
        let e = max_abs_error((relu, &[]), (lrelu, &[0.1]), -5.0, 2.0);
        assert_eq!(
            e,
            ErrorBound {
                value: 0.5,
                at: -5.0
            }
        );
        let e = max_abs_error((relu, &[]), (lrelu, &[0.1]), f64::NEG_INFINITY, 2.0);
        assert_eq!((e.value, e.at), (f64::INFINITY, f64::NEG_INFINITY));
        // Reversed bounds are accepted; a wrong parameter count gives NaN, not a panic.
        let e = max_abs_error((relu, &[]), (lrelu, &[0.1]), 2.0, -5.0);
        assert_eq!(e.value, 0.5);
        assert!(
            max_abs_error((relu, &[]), (lrelu, &[]), -1.0, 1.0)
                .value
                .is_nan()
        );
        assert!(lrelu.eval(-1.0, &[]).is_nan());
        let nan = max_abs_error((relu, &[]), (relu, &[]), f64::NAN, 1.0);
        assert!(nan.value.is_nan() && nan.at.is_nan());
    }
}
