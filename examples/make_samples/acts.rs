//! Activation emitters: each writes one activation in a given form, names its tensors after
//! `out` (`<out>.sig`, `<out>.erf`, ...) and records the site it makes.

use actswap::onnx::builder::attr_f;
use actswap::onnx::proto::AttributeProto;

use crate::net::{Net, Param, SiteSpec};

/// float32 of 1/6, the HardSwish slope (ONNX HardSwish function body).
const SIXTH: f32 = 1.0 / 6.0;

impl Net {
    /// One fused op `op(x)` with attributes `attrs`, recorded as `kind` with `params`.
    pub fn fused(
        &mut self,
        kind: &'static str,
        op: &str,
        x: &str,
        out: &str,
        attrs: Vec<AttributeProto>,
        params: Vec<(&'static str, Param)>,
    ) -> String {
        let mark = self.mark();
        let y = self.op(op, out, &[x], attrs);
        let spec = SiteSpec::new(kind, "fused", x, &y).params(params);
        self.site_since(mark, spec);
        y
    }

    /// PRelu with a per-channel slope initializer `<out>.slope` (shape [channels]).
    pub fn prelu(&mut self, x: &str, out: &str, channels: i64) -> String {
        let slope = self.uniform(channels as usize, 0.05, 0.3);
        let s = self.init(&format!("{out}.slope"), &[channels], &slope);
        let mark = self.mark();
        let y = self.op("PRelu", out, &[x, &s], vec![]);
        let params = vec![("slope", Param::PerChannel(slope))];
        let spec = SiteSpec::new("prelu", "fused", x, &y)
            .params(params)
            .constants(&[&s]);
        self.site_since(mark, spec);
        y
    }

    /// ReLU6 as Clip(x, 0, 6) with min and max read from initializers (opset 11+ input form).
    pub fn relu6_clip(&mut self, x: &str, out: &str) -> String {
        let lo = self.scalar(&format!("{out}.min"), 0.0);
        let hi = self.scalar(&format!("{out}.max"), 6.0);
        let mark = self.mark();
        let y = self.op("Clip", out, &[x, &lo, &hi], vec![]);
        let spec = SiteSpec::new("relu6", "fused", x, &y)
            .params(relu6_params())
            .constants(&[&lo, &hi]);
        self.site_since(mark, spec);
        y
    }

    /// ReLU6 as Clip(x, 0, 6) with min and max made by Constant nodes.
    pub fn relu6_clip_constant_nodes(&mut self, x: &str, out: &str) -> String {
        let mark = self.mark();
        let lo = self.constant_node(&format!("{out}.min"), 0.0);
        let hi = self.constant_node(&format!("{out}.max"), 6.0);
        let y = self.op("Clip", out, &[x, &lo, &hi], vec![]);
        let spec = SiteSpec::new("relu6", "fused", x, &y).params(relu6_params());
        self.site_since(mark, spec);
        y
    }

    /// SiLU: Sigmoid(x) then Mul(x, s), or Mul(s, x) when `sigmoid_first`.
    pub fn silu(&mut self, x: &str, out: &str, sigmoid_first: bool) -> String {
        let mark = self.mark();
        let s = self.op("Sigmoid", &format!("{out}.sig"), &[x], vec![]);
        let operands = if sigmoid_first { [&s, x] } else { [x, &s] };
        let y = self.op("Mul", out, &operands, vec![]);
        let spec = SiteSpec::new("silu", "decomposed", x, &y);
        self.site_since(mark, spec);
        y
    }

    /// Swish with a per-channel beta initializer of shape `beta_dims`: Mul(beta, x), Sigmoid,
    /// Mul(x, s).
    pub fn swish_per_channel(&mut self, x: &str, out: &str, beta_dims: &[i64]) -> String {
        let n = beta_dims.iter().product::<i64>() as usize;
        let beta = self.uniform(n, 0.5, 2.0);
        let b = self.init(&format!("{out}.beta"), beta_dims, &beta);
        let mark = self.mark();
        let bx = self.op("Mul", &format!("{out}.beta_x"), &[&b, x], vec![]);
        let s = self.op("Sigmoid", &format!("{out}.sig"), &[&bx], vec![]);
        let y = self.op("Mul", out, &[x, &s], vec![]);
        let params = vec![("beta", Param::PerChannel(beta))];
        let spec = SiteSpec::new("swish", "decomposed", x, &y)
            .params(params)
            .constants(&[&b]);
        self.site_since(mark, spec);
        y
    }

    /// Swish with a scalar beta from a Constant node: Mul(x, beta), Sigmoid, Mul(x, s).
    pub fn swish_constant_node(&mut self, x: &str, out: &str, beta: f32) -> String {
        let mark = self.mark();
        let b = self.constant_node(&format!("{out}.beta"), beta);
        let bx = self.op("Mul", &format!("{out}.beta_x"), &[x, &b], vec![]);
        let s = self.op("Sigmoid", &format!("{out}.sig"), &[&bx], vec![]);
        let y = self.op("Mul", out, &[x, &s], vec![]);
        let params = vec![("beta", Param::Scalar(beta))];
        let spec = SiteSpec::new("swish", "decomposed", x, &y).params(params);
        self.site_since(mark, spec);
        y
    }

    /// Hard-swish as HardSigmoid(alpha = 1/6, beta = 0.5) then Mul(x, h).
    pub fn hard_swish_hard_sigmoid(&mut self, x: &str, out: &str) -> String {
        let mark = self.mark();
        let attrs = vec![attr_f("alpha", SIXTH), attr_f("beta", 0.5)];
        let h = self.op("HardSigmoid", &format!("{out}.hsig"), &[x], attrs);
        let y = self.op("Mul", out, &[x, &h], vec![]);
        let spec = SiteSpec::new("hard_swish", "decomposed", x, &y);
        self.site_since(mark, spec);
        y
    }

    /// Hard-swish as x * ReLU6(x + 3) / 6: Add(x, 3), Clip(0, 6), Mul(x, r), Div(m, 6).
    pub fn hard_swish_relu6(&mut self, x: &str, out: &str) -> String {
        let three = self.scalar(&format!("{out}.three"), 3.0);
        let lo = self.scalar(&format!("{out}.clip_min"), 0.0);
        let hi = self.scalar(&format!("{out}.clip_max"), 6.0);
        let six = self.scalar(&format!("{out}.six"), 6.0);
        let mark = self.mark();
        let a = self.op("Add", &format!("{out}.add3"), &[x, &three], vec![]);
        let r = self.op("Clip", &format!("{out}.relu6"), &[&a, &lo, &hi], vec![]);
        let m = self.op("Mul", &format!("{out}.mul"), &[x, &r], vec![]);
        let y = self.op("Div", out, &[&m, &six], vec![]);
        let consts = [three.as_str(), &lo, &hi, &six];
        let spec = SiteSpec::new("hard_swish", "decomposed", x, &y).constants(&consts);
        self.site_since(mark, spec);
        y
    }

    /// Exact GELU: Div(x, sqrt 2), Erf, Add(1), Mul(x), Mul(0.5); `half` and `one` are shared
    /// initializers.
    pub fn gelu_erf(&mut self, x: &str, out: &str, half: &str, one: &str) -> String {
        let sqrt2 = self.scalar(&format!("{out}.sqrt2"), std::f32::consts::SQRT_2);
        let mark = self.mark();
        let d = self.op("Div", &format!("{out}.div"), &[x, &sqrt2], vec![]);
        let e = self.op("Erf", &format!("{out}.erf"), &[&d], vec![]);
        let e1 = self.op("Add", &format!("{out}.erf1"), &[&e, one], vec![]);
        let m = self.op("Mul", &format!("{out}.mul"), &[x, &e1], vec![]);
        let y = self.op("Mul", out, &[&m, half], vec![]);
        let spec = SiteSpec::new("gelu", "decomposed", x, &y)
            .constants(&[&sqrt2])
            .shared_constants(&[half, one]);
        self.site_since(mark, spec);
        y
    }

    /// tanh-GELU: x*x*x, Mul 0.044715, Add x, Mul sqrt(2/pi), Tanh, Add 1, Mul x, Mul 0.5;
    /// `half` and `one` are shared initializers.
    pub fn gelu_tanh(&mut self, x: &str, out: &str, half: &str, one: &str) -> String {
        let c = self.scalar(&format!("{out}.coef"), 0.044715);
        let k = self.scalar(&format!("{out}.sqrt_2_over_pi"), 0.797_884_6);
        let mark = self.mark();
        let sq = self.op("Mul", &format!("{out}.sq"), &[x, x], vec![]);
        let cube = self.op("Mul", &format!("{out}.cube"), &[&sq, x], vec![]);
        let cs = self.op("Mul", &format!("{out}.cube_scaled"), &[&cube, &c], vec![]);
        let inner = self.op("Add", &format!("{out}.inner"), &[x, &cs], vec![]);
        let z = self.op("Mul", &format!("{out}.z"), &[&inner, &k], vec![]);
        let t = self.op("Tanh", &format!("{out}.tanh"), &[&z], vec![]);
        let t1 = self.op("Add", &format!("{out}.tanh1"), &[&t, one], vec![]);
        let m = self.op("Mul", &format!("{out}.mul"), &[x, &t1], vec![]);
        let y = self.op("Mul", out, &[&m, half], vec![]);
        let spec = SiteSpec::new("gelu_tanh", "decomposed", x, &y)
            .constants(&[&c, &k])
            .shared_constants(&[half, one]);
        self.site_since(mark, spec);
        y
    }

    /// Mish: Softplus, Tanh, Mul(x, t).
    pub fn mish(&mut self, x: &str, out: &str) -> String {
        let mark = self.mark();
        let sp = self.op("Softplus", &format!("{out}.softplus"), &[x], vec![]);
        let t = self.op("Tanh", &format!("{out}.tanh"), &[&sp], vec![]);
        let y = self.op("Mul", out, &[x, &t], vec![]);
        let spec = SiteSpec::new("mish", "decomposed", x, &y);
        self.site_since(mark, spec);
        y
    }

    /// A gate a * Sigmoid(b) of two different tensors: the Sigmoid is a site, the product is a
    /// near miss of SiLU and swish.
    pub fn sigmoid_gate(&mut self, a: &str, b: &str, out: &str) -> String {
        let mark = self.mark();
        let s = self.fused(
            "sigmoid",
            "Sigmoid",
            b,
            &format!("{out}.sig"),
            vec![],
            vec![],
        );
        let y = self.op("Mul", out, &[a, &s], vec![]);
        let reason = "a * sigmoid(b) with b a different tensor (a gate)";
        self.near_miss_since(mark, &["silu", "swish"], reason, &[a, b], &y);
        y
    }

    /// x * HardSigmoid(x) with the ONNX default alpha 0.2, beta 0.5: the HardSigmoid is a site,
    /// the product is a near miss of hard-swish (which needs alpha 1/6).
    pub fn x_times_default_hard_sigmoid(&mut self, x: &str, out: &str) -> String {
        let params = vec![("alpha", Param::Scalar(0.2)), ("beta", Param::Scalar(0.5))];
        let mark = self.mark();
        let h = self.fused(
            "hard_sigmoid",
            "HardSigmoid",
            x,
            &format!("{out}.hsig"),
            vec![],
            params,
        );
        let y = self.op("Mul", out, &[x, &h], vec![]);
        let reason = "x * HardSigmoid(x) with the ONNX default alpha 0.2, not 1/6";
        self.near_miss_since(mark, &["hard_swish"], reason, &[x], &y);
        y
    }
}

fn relu6_params() -> Vec<(&'static str, Param)> {
    vec![("min", Param::Scalar(0.0)), ("max", Param::Scalar(6.0))]
}
