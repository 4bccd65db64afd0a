//! The linear layers between activations: Conv (1-D or 2-D), Gemm, and MatMul followed by Add.

use actswap::onnx::builder::{attr_i, attr_ints};

use crate::net::Net;

impl Net {
    /// A convolution with `cout` filters of shape `k` (its length sets 1-D or 2-D), the given
    /// stride and `k / 2` padding on each side. Its output is the tensor `name`.
    pub fn conv(
        &mut self,
        name: &str,
        x: &str,
        cin: i64,
        cout: i64,
        k: &[i64],
        stride: i64,
    ) -> String {
        let mut dims = vec![cout, cin];
        dims.extend_from_slice(k);
        let fan_in = cin * k.iter().product::<i64>();
        let (w, b) = self.layer_params(name, &dims, fan_in, cout);
        let pads: Vec<i64> = k.iter().chain(k).map(|k| k / 2).collect();
        let attrs = vec![
            attr_ints("kernel_shape", k),
            attr_ints("strides", &vec![stride; k.len()]),
            attr_ints("pads", &pads),
        ];
        self.op("Conv", name, &[x, &w, &b], attrs)
    }

    /// `x @ W^T + b` as one Gemm (W stored as [cout, cin], transB = 1).
    pub fn gemm(&mut self, name: &str, x: &str, cin: i64, cout: i64) -> String {
        let (w, b) = self.layer_params(name, &[cout, cin], cin, cout);
        self.op("Gemm", name, &[x, &w, &b], vec![attr_i("transB", 1)])
    }

    /// `x @ W + b` as MatMul (tensor `<name>.matmul`) then Add (tensor `name`).
    pub fn matmul_add(&mut self, name: &str, x: &str, cin: i64, cout: i64) -> String {
        let (w, b) = self.layer_params(name, &[cin, cout], cin, cout);
        let mm = self.op("MatMul", &format!("{name}.matmul"), &[x, &w], vec![]);
        self.op("Add", name, &[&mm, &b], vec![])
    }
}
