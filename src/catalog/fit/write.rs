//! The fitted form as ONNX nodes, with Max, Min, Sub, Mul and Add only (opset 8 and later):
//!
//! `y = s0 * (Min(x, t0) - t0) + sum_i s_i * (Min(Max(x, t_{i-1}), t_i) - t_{i-1})
//!      + sR * (Max(x, tK) - tK) + value`
//!
//! Each term is bounded by its segment, so the sum loses no precision to cancellation (the
//! `a + b x + sum c_i Relu(x - t_i)` spelling adds terms that grow with |x| and cancel). A tail
//! with slope 0 on every channel is left out. Constants are one value for all channels, or one
//! per channel with the site's parameter dims.

use super::super::emit::{Builder, EmitCtx, Emitted, Form, Unavailable, ops};
use super::{Fitted, Pwl};

impl Fitted {
    /// Writes this fit for the site `ctx`.
    pub fn emit(&self, ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
        let mut b = Builder::new(ctx, self.kind.id, self.kind.params, Form::Fitted)?;
        let last = write(&mut b, self)?;
        Ok(b.finish(&last))
    }
}

/// Writes `fitted` for the builder's site; returns the tensor holding the result.
fn write(b: &mut Builder, fitted: &Fitted) -> Result<String, Unavailable> {
    let x = b.input();
    let k = fitted.segments;
    let per_channel =
        |f: &dyn Fn(&Pwl) -> f64| -> Vec<f64> { fitted.channels.iter().map(f).collect() };
    let knots: Vec<String> = (0..=k)
        .map(|i| b.channel_values(&format!("knot{i}"), &per_channel(&|p| p.knots[i])))
        .collect();
    let mut terms: Vec<String> = Vec::with_capacity(k + 2);
    let left = per_channel(&|p| p.slopes[0]);
    if left.iter().any(|&s| s != 0.0) {
        let slope = b.channel_values("slope.left", &left);
        let m = b.node(ops::MIN, "left.min", &[x, &knots[0]], vec![])?;
        let d = b.node(ops::SUB, "left.sub", &[&m, &knots[0]], vec![])?;
        terms.push(b.node(ops::MUL, "left.mul", &[&d, &slope], vec![])?);
    }
    for i in 0..k {
        let slope = b.channel_values(&format!("slope{i}"), &per_channel(&|p| p.slopes[i + 1]));
        let hi = b.node(ops::MAX, &format!("seg{i}.max"), &[x, &knots[i]], vec![])?;
        let m = b.node(
            ops::MIN,
            &format!("seg{i}.min"),
            &[&hi, &knots[i + 1]],
            vec![],
        )?;
        let d = b.node(ops::SUB, &format!("seg{i}.sub"), &[&m, &knots[i]], vec![])?;
        terms.push(b.node(ops::MUL, &format!("seg{i}.mul"), &[&d, &slope], vec![])?);
    }
    let right = per_channel(&|p| p.slopes[k + 1]);
    if right.iter().any(|&s| s != 0.0) {
        let slope = b.channel_values("slope.right", &right);
        let m = b.node(ops::MAX, "right.max", &[x, &knots[k]], vec![])?;
        let d = b.node(ops::SUB, "right.sub", &[&m, &knots[k]], vec![])?;
        terms.push(b.node(ops::MUL, "right.mul", &[&d, &slope], vec![])?);
    }
    let mut sum = terms[0].clone();
    for (i, term) in terms.iter().enumerate().skip(1) {
        sum = b.node(ops::ADD, &format!("sum{i}"), &[&sum, term], vec![])?;
    }
    let value = b.channel_values("value", &per_channel(&|p| p.value));
    b.node(ops::ADD, "sum.value", &[&sum, &value], vec![])
}
