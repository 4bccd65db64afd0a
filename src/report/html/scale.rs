//! Axes: mapping data to picture coordinates, linear and logarithmic, and where ticks go.

/// A linear map from a data interval onto a picture interval (which may run backwards, as y
/// does).
#[derive(Debug, Clone, Copy)]
pub struct Linear {
    pub lo: f64,
    pub hi: f64,
    from: f64,
    to: f64,
}

impl Linear {
    /// Maps `[lo, hi]` onto `[from, to]`; a flat interval is widened by one unit each way.
    pub fn new((lo, hi): (f64, f64), (from, to): (f64, f64)) -> Linear {
        let (lo, hi) = if hi > lo {
            (lo, hi)
        } else {
            (lo - 1.0, lo + 1.0)
        };
        Linear { lo, hi, from, to }
    }

    pub fn map(&self, v: f64) -> f64 {
        self.from + (v - self.lo) / (self.hi - self.lo) * (self.to - self.from)
    }

    /// About `n` round ticks (steps of 1, 2 or 5 times a power of ten) inside the interval.
    pub fn ticks(&self, n: usize) -> Vec<f64> {
        let step = nice_step((self.hi - self.lo) / n.max(1) as f64);
        let first = (self.lo / step).ceil() as i64;
        let last = (self.hi / step).floor() as i64;
        (first..=last)
            .map(|i| {
                let v = i as f64 * step;
                if v.abs() < step * 1e-9 { 0.0 } else { v }
            })
            .collect()
    }

    /// A tick's label, with as many decimals as the tick step needs.
    pub fn tick_label(&self, v: f64, n: usize) -> String {
        let step = nice_step((self.hi - self.lo) / n.max(1) as f64);
        if !(1e-4..1e6).contains(&step) {
            return format!("{v:.1e}");
        }
        let decimals = (-step.log10().floor()).max(0.0) as usize;
        minus(&format!("{v:.decimals$}"))
    }
}

/// A base-10 logarithmic map from whole decades `[10^lo, 10^hi]` onto a picture interval.
#[derive(Debug, Clone, Copy)]
pub struct Log10 {
    pub lo: i32,
    pub hi: i32,
    from: f64,
    to: f64,
}

impl Log10 {
    /// The decades covering every positive value of `values`, at least one decade, at most
    /// `max_decades` below the largest; `None` when no value is positive and finite.
    pub fn covering(
        values: impl Iterator<Item = f64>,
        max_decades: i32,
        (from, to): (f64, f64),
    ) -> Option<Log10> {
        let (min, max) = values
            .filter(|v| *v > 0.0 && v.is_finite())
            .fold(None, |acc: Option<(f64, f64)>, v| {
                Some(acc.map_or((v, v), |(a, b)| (a.min(v), b.max(v))))
            })?;
        let hi = max.log10().ceil() as i32;
        // A little room below the smallest value, so that its bar is never of zero length.
        let lo = ((min.log10() - 0.3).floor() as i32).clamp(hi - max_decades, hi - 1);
        Some(Log10 { lo, hi, from, to })
    }

    /// The picture coordinate of a positive value (values below the axis sit at its start).
    pub fn map(&self, v: f64) -> f64 {
        let t = ((v.log10() - self.lo as f64) / (self.hi - self.lo) as f64).max(0.0);
        self.from + t * (self.to - self.from)
    }

    /// Decade ticks, thinned so that at most `max` are labelled.
    pub fn ticks(&self, max: usize) -> Vec<i32> {
        let span = (self.hi - self.lo) as usize;
        let every = span.div_ceil(max.max(1)).max(1);
        (self.lo..=self.hi)
            .filter(|e| ((e - self.lo) as usize).is_multiple_of(every))
            .collect()
    }
}

/// `10` with a superscript exponent, as in 10⁻⁶.
pub fn decade_label(e: i32) -> String {
    const SUP: [char; 10] = ['⁰', '¹', '²', '³', '⁴', '⁵', '⁶', '⁷', '⁸', '⁹'];
    let mut s = String::from("10");
    if e < 0 {
        s.push('⁻');
    }
    for d in e.unsigned_abs().to_string().bytes() {
        s.push(SUP[(d - b'0') as usize]);
    }
    s
}

/// Typographic minus signs in place of hyphens, for figures in plots.
pub fn minus(s: &str) -> String {
    s.replace('-', "−")
}

/// 1, 2 or 5 times a power of ten, whichever is nearest `raw`.
fn nice_step(raw: f64) -> f64 {
    if !(raw > 0.0 && raw.is_finite()) {
        return 1.0;
    }
    let p = 10f64.powf(raw.log10().floor());
    let m = match raw / p {
        r if r < 1.5 => 1.0,
        r if r < 3.0 => 2.0,
        r if r < 7.0 => 5.0,
        _ => 10.0,
    };
    m * p
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn linear_ticks_are_round() {
        let s = Linear::new((-4.2, 4.2), (0.0, 100.0));
        assert_eq!(s.ticks(4), vec![-4.0, -2.0, 0.0, 2.0, 4.0]);
        assert_eq!(s.tick_label(-2.0, 4), "−2");
        assert_eq!(s.map(-4.2), 0.0);
        assert_eq!(
            Linear::new((0.0, 0.3), (0.0, 1.0)).tick_label(0.1, 3),
            "0.1"
        );
    }

    #[test]
    fn log_axis_covers_whole_decades() {
        let s = Log10::covering([3e-7, 0.14, 0.0].into_iter(), 12, (0.0, 60.0)).unwrap();
        assert_eq!((s.lo, s.hi), (-7, 0));
        let one = Log10::covering([1.0].into_iter(), 12, (0.0, 1.0)).unwrap();
        assert_eq!((one.lo, one.hi), (-1, 0));
        assert!(Log10::covering([0.0].into_iter(), 12, (0.0, 1.0)).is_none());
        assert_eq!(decade_label(-12), "10⁻¹²");
    }
}
