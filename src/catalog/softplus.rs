//! softplus: ln(1 + e^x).

use super::{FusedOp, Kind, nothing_to_recover, numeric, smooth};

pub const KIND: Kind = Kind {
    id: "softplus",
    title: "Softplus",
    params: &[],
    reference: |x, _| numeric::softplus(x),
    recover: nothing_to_recover,
    breakpoints: smooth,
    fused: &[FusedOp {
        domain: "",
        op_type: "Softplus",
        since: 1,
        note: "versions 1, 22; function body Exp, Add 1, Log, which is the naive form \
               (ONNX Softplus schema)",
    }],
    formula: "f(x) = ln(exp(x) + 1)",
    source: "ONNX operator schema Softplus (onnx/defs/math/defs.cc); Dugas et al. 2001, \
             'Incorporating Second-Order Functional Knowledge for Better Option Pricing' \
             (from memory)",
    forms: &[
        "fused: Softplus(x)",
        "primitive: Log(Add(Exp(x), 1))",
        "also seen: Where(Greater(x, 20), x, Softplus(x)) (PyTorch's threshold)",
    ],
    example: "A rainfall-intensity model (invented) keeps its scale output positive with \
              Softplus: softplus(0) = ln 2 = 0.6931471805599453.",
    numeric_notes: "Evaluated as max(x, 0) + ln_1p(exp(-|x|)). The naive ln(1 + exp(x)) is \
                    inf in float32 above x = 88.72 and 0 below about -16.64, where \
                    1 + exp(x) rounds to 1; the thresholded export returns x above 20, off by \
                    at most 2.1e-9.",
    piecewise_linear: false,
};
