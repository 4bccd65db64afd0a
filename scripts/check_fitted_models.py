"""Checks fitted forms written by `actswap swap --to KIND=fitted:N` against outside tools.

For single-site models of several kinds (built here with onnx.helper, float64 and float32), the
model rewritten to a fitted form must pass onnx.checker.check_model(full_check=True), and the
error of onnxruntime's output against numpy's float64 evaluation of the kind's formula on a dense
grid must be:
- float64 models: at most the bound actswap reports (+1e-6), and within 1e-6 of it (inside the
  fitting range; over [-100, 100] at most the real-line bound);
- float32 models: at most the bound + 1e-6 inside [-8, 8]; over [-100, 100], where a float32
  output near 100 is itself only defined to 3.8e-6, at most the bound + (K + 3) * eps32 *
  (1 + |x|) at each point: the rounding of the K + 3 float32 additions of the emitted sum
  (the standard model of floating-point addition, Higham, "Accuracy and Stability of Numerical
  Algorithms", 2002, ch. 2), as tests/fitted_forms.rs allows.
The formulas are those the catalogue cites (SiLU: Elfwing et al. 2017; GELU: Hendrycks & Gimpel
2016; Mish: Misra 2019; ELU: Clevert et al. 2015; swish: Ramachandran et al. 2017). The figure
to beat is hard-swish's 3 / (1 + e^3) = 0.1423 against SiLU (Howard et al. 2019): the 8-segment
SiLU fit must be below a tenth of it.

Pinned versions: scripts/requirements-ci.txt. Needs the built binary:
    cargo build --bin actswap
    python3 scripts/check_fitted_models.py [TARGET_DIR]
"""

import json
import math
import os
import subprocess
import sys
import tempfile

import numpy as np
import onnx
import onnxruntime as ort
from onnx import TensorProto, helper, numpy_helper

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
TARGET = sys.argv[1] if len(sys.argv) > 1 else os.environ.get("CARGO_TARGET_DIR", os.path.join(ROOT, "target"))
ACTSWAP = os.path.join(TARGET, "debug", "actswap")
SLACK = 1e-6
HARD_SWISH_SILU = 3.0 / (1.0 + math.exp(3.0))
ERF = np.vectorize(math.erf)


def sigmoid(x):
    return 0.5 * (1.0 + np.tanh(0.5 * x))


def softplus(x):
    return np.maximum(x, 0.0) + np.log1p(np.exp(-np.abs(x)))


BETAS = np.array([0.5, 1.0, 1.702])

# Each kind's formula in float64 (x of shape [N], or [1, 3, N, 1] for the per-channel swish).
KINDS = {
    "silu": lambda x: x * sigmoid(x),
    "gelu": lambda x: 0.5 * x * (1.0 + ERF(x / math.sqrt(2.0))),
    "tanh": np.tanh,
    "sigmoid": sigmoid,
    "mish": lambda x: x * np.tanh(softplus(x)),
    "elu": lambda x: np.where(x > 0, x, 0.5 * np.expm1(np.minimum(x, 0.0))),
    "swish": lambda x: x * sigmoid(BETAS.reshape(1, 3, 1, 1) * x),
}


def const(name, values, dtype):
    return numpy_helper.from_array(np.asarray(values, dtype=dtype), name)


def site_model(kind, elem):
    """A one-site model y = kind(x) as exporters write it."""
    dtype = np.float64 if elem == TensorProto.DOUBLE else np.float32
    inits = []
    shape = [1, 3, None, 1] if kind == "swish" else [None]
    if kind == "silu":
        nodes = [helper.make_node("Sigmoid", ["x"], ["s"]), helper.make_node("Mul", ["x", "s"], ["y"])]
    elif kind == "gelu":
        inits = [const("sqrt2", math.sqrt(2.0), dtype), const("one", 1.0, dtype), const("half", 0.5, dtype)]
        nodes = [
            helper.make_node("Div", ["x", "sqrt2"], ["d"]),
            helper.make_node("Erf", ["d"], ["e"]),
            helper.make_node("Add", ["e", "one"], ["a"]),
            helper.make_node("Mul", ["x", "a"], ["m"]),
            helper.make_node("Mul", ["m", "half"], ["y"]),
        ]
    elif kind == "tanh":
        nodes = [helper.make_node("Tanh", ["x"], ["y"])]
    elif kind == "sigmoid":
        nodes = [helper.make_node("Sigmoid", ["x"], ["y"])]
    elif kind == "mish":
        nodes = [
            helper.make_node("Softplus", ["x"], ["sp"]),
            helper.make_node("Tanh", ["sp"], ["t"]),
            helper.make_node("Mul", ["x", "t"], ["y"]),
        ]
    elif kind == "elu":
        nodes = [helper.make_node("Elu", ["x"], ["y"], alpha=0.5)]
    elif kind == "swish":
        inits = [const("beta", BETAS.reshape(1, 3, 1, 1), dtype)]
        nodes = [
            helper.make_node("Mul", ["x", "beta"], ["bx"]),
            helper.make_node("Sigmoid", ["bx"], ["s"]),
            helper.make_node("Mul", ["x", "s"], ["y"]),
        ]
    graph = helper.make_graph(
        nodes,
        f"{kind}-site",
        [helper.make_tensor_value_info("x", elem, shape)],
        [helper.make_tensor_value_info("y", elem, shape)],
        inits,
    )
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17)], producer_name="check")
    model.ir_version = 8
    return model


def fitted(src, out, kind, segments):
    args = [ACTSWAP, "swap", src, "-o", out, "--to", f"{kind}=fitted:{segments}", "--fit-range=-8,8", "--json"]
    res = subprocess.run(args, capture_output=True, text=True)
    if res.returncode != 0:
        raise RuntimeError(f"{' '.join(args[1:])}: exit {res.returncode}: {res.stderr.strip()}")
    sites = json.loads(res.stdout)["sites"]
    assert len(sites) == 1 and sites[0]["action"] == "rewrite", sites
    assert sites[0]["to"]["form"] == "fitted", sites[0]["to"]
    return sites[0]["fit"]


def measured(path, kind, xs, elem, segments):
    """Max |onnxruntime - numpy|, and the max of that error less the float32 rounding allowed."""
    dtype = np.float64 if elem == TensorProto.DOUBLE else np.float32
    x = xs.astype(dtype)
    if kind == "swish":
        x = np.broadcast_to(x.reshape(1, 1, -1, 1), (1, 3, x.size, 1)).copy()
    sess = ort.InferenceSession(path, providers=["CPUExecutionProvider"])
    (y,) = sess.run(None, {"x": x})
    wide = x.astype(np.float64)
    err = np.abs(y.astype(np.float64) - KINDS[kind](wide))
    rounding = 0.0 if elem == TensorProto.DOUBLE else (segments + 3) * float(np.finfo(np.float32).eps) * (1.0 + np.abs(wide))
    return float(err.max()), float((err - rounding).max())


def main():
    failures, checked = [], 0
    inside = np.linspace(-8.0, 8.0, 160_001)
    wide = np.linspace(-100.0, 100.0, 200_001)
    with tempfile.TemporaryDirectory() as tmp:
        for kind in KINDS:
            for segments in (8, 16):
                for elem in (TensorProto.DOUBLE, TensorProto.FLOAT):
                    name = f"{kind}-{segments}-{TensorProto.DataType.Name(elem).lower()}"
                    src = os.path.join(tmp, f"{name}.onnx")
                    out = os.path.join(tmp, f"{name}.fitted.onnx")
                    onnx.save(site_model(kind, elem), src)
                    try:
                        fit = fitted(src, out, kind, segments)
                        onnx.checker.check_model(onnx.load(out), full_check=True)
                        bound_in = fit["in_range"]["max_abs"]
                        bound_reals = fit["over_reals"]["max_abs"]
                        err_in, _ = measured(out, kind, inside, elem, segments)
                        err_wide, excess_wide = measured(out, kind, wide, elem, segments)
                    except Exception as e:  # noqa: BLE001 - every failure is reported
                        failures.append(f"{name}: {e}")
                        continue
                    checked += 1
                    print(f"{name}: reported {bound_in:.6g} (real line {bound_reals:.6g}), "
                          f"onnxruntime {err_in:.6g} (over [-100, 100] {err_wide:.6g})")
                    if err_in > bound_in + SLACK:
                        failures.append(f"{name}: measured {err_in} above the bound {bound_in}")
                    if excess_wide > bound_reals + SLACK:
                        failures.append(f"{name}: measured {err_wide} above the real-line bound {bound_reals}")
                    if elem == TensorProto.DOUBLE and bound_in - err_in > SLACK:
                        failures.append(f"{name}: bound {bound_in} more than {SLACK} above measured {err_in}")
                    if kind == "silu" and segments == 8 and not bound_in < HARD_SWISH_SILU / 10:
                        failures.append(f"{name}: {bound_in} does not beat hard-swish's {HARD_SWISH_SILU} tenfold")
    for f in failures:
        print("FAIL", f)
    print(f"{checked} fitted models checked, {len(failures)} failures")
    return 1 if failures or checked == 0 else 0


if __name__ == "__main__":
    sys.exit(main())
