//! The tolerance ladder every numeric test climbs: each check names the rung it needs and why,
//! instead of an epsilon of its own. Rungs from strict to loose.
#![allow(dead_code)]

/// tract's f32 Sigmoid and Tanh clamp their input (to +-14.5 and +-7.5) and then return
/// 4.8e-7 and 1 - 6.1e-7 instead of 0 and 1 (tract-linalg 0.23.9, generic/sigmoid.rs and
/// generic/tanh.rs); the larger of the two floors.
pub const TRACT_SATURATION: f64 = 6.1e-7;

/// How close a value at `x` must be to the reference `r` (both f64).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Tol {
    /// Equal to `r` bit for bit (f64): one formula evaluated two ways that must agree exactly.
    Identical,
    /// Equal to `r` rounded to float32: one correctly rounded operation away from the formula.
    Exact,
    /// Within 1e-12 relative: two f64 evaluations of one formula (a few dozen f64 roundings,
    /// 2^-53 = 1.1e-16 each, and the cancellation of a difference).
    Double,
    /// Within `10^-n` absolute: a value known to `n` decimals (a check value its source prints
    /// with `n` decimals, or two double-precision evaluations of one identity).
    Digits(i32),
    /// Within 1e-6 relative: a float32 attribute or constant against the decimal its source
    /// writes (float32 keeps 24 bits, 6e-8 relative, a few roundings more in a computed one).
    Attribute,
    /// Within 1e-5 relative: a parameter recovered numerically from a chain of float32
    /// constants, against the value the exporter was given.
    Recovered,
    /// Within 1e-6 * (1 + |r|): a few float32 roundings (2^-24 = 6e-8 each).
    Close,
    /// Within 1e-5 * (1 + |r|): a runtime op's approximation error a little above Close.
    Approx,
    /// Within 1e-5 + 1e-5 * |r|: two runtimes computing one float32 model (onnxruntime against
    /// tract): each rounds in its own order and uses its own exp/erf/tanh kernels.
    Runtimes,
    /// Within 1e-4 * (1 + |r|): one model run end to end by two runtimes through many layers
    /// (attention, normalisation), where float32 rounding accumulates.
    Layers,
    /// Within a bound the test derives from the formula itself, and says how (a Taylor term,
    /// half a unit of a check value's last printed decimal).
    Derived(f64),
    /// Within 2^-10 + 2^-10 * |r|: float16 values, one unit in the last place at 1.0.
    Float16,
    /// Close plus |x| * [`TRACT_SATURATION`]: a form that multiplies x by a factor saturating
    /// to 0 (x * sigmoid(b x), 0.5 x (1 + tanh z)), run on a runtime whose sigmoid or tanh
    /// stops short of saturating. Unbounded as x grows: it says only that the error is that
    /// floor and nothing else.
    TailFloor,
}

impl Tol {
    /// The largest |got - r| allowed at `x`.
    pub fn bound(self, x: f64, r: f64) -> f64 {
        match self {
            Tol::Identical | Tol::Exact => 0.0,
            Tol::Derived(bound) => bound,
            Tol::Double => 1e-12 * r.abs(),
            Tol::Digits(n) => 10f64.powi(-n),
            Tol::Attribute => 1e-6 * r.abs().max(1e-30),
            Tol::Recovered => 1e-5 * r.abs().max(1e-30),
            Tol::Close => 1e-6 * (1.0 + r.abs()),
            Tol::Approx => 1e-5 * (1.0 + r.abs()),
            Tol::Runtimes => 1e-5 + 1e-5 * r.abs(),
            Tol::Layers => 1e-4 * (1.0 + r.abs()),
            Tol::Float16 => (1.0 + r.abs()) / 1024.0,
            Tol::TailFloor => 1e-6 * (1.0 + r.abs()) + x.abs() * TRACT_SATURATION,
        }
    }

    /// True for the rungs of float32 values: the reference is compared as float32 stores it
    /// where it must be exact or is beyond float32's range.
    fn float32(self) -> bool {
        !matches!(
            self,
            Tol::Identical
                | Tol::Double
                | Tol::Digits(_)
                | Tol::Attribute
                | Tol::Recovered
                | Tol::Derived(_)
        )
    }

    /// None when `got` passes at `x`, else what is wrong. NaN never passes; a reference beyond
    /// the value type's range must come out as the same infinity.
    pub fn check(self, x: f64, got: f64, r: f64) -> Option<String> {
        let typed = if self.float32() { r as f32 as f64 } else { r };
        if got.is_nan() {
            return Some(format!("NaN where the reference is {r:e}"));
        }
        if typed.is_infinite() || got.is_infinite() || matches!(self, Tol::Exact | Tol::Identical) {
            return (got != typed).then(|| format!("{got:e}, want {typed:e} exactly"));
        }
        let err = (got - r).abs();
        (err > self.bound(x, r)).then(|| format!("{got:e}, want {r:e} (error {err:e})"))
    }

    /// True when `got` passes against `r` (the rungs that do not depend on x).
    pub fn holds(self, got: f64, r: f64) -> bool {
        self.check(0.0, got, r).is_none()
    }
}
