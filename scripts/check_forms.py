"""Checks the emitted activation forms with the onnx package and onnxruntime.

Input: the folder written by the forms tests with ACTSWAP_FORMS_DUMP set,

    ACTSWAP_FORMS_DUMP=/some/dir cargo test --test forms every_form
    python3 scripts/check_forms.py /some/dir

For each one-site model: onnx.checker.check_model(full_check=True) (the ONNX schemas, strict
shape inference), then a run in onnxruntime on the model's inputs, compared with the kind's
formula written here from its source (ONNX operator schemas; the papers cited in the
catalogue) and evaluated with Python's math module in double precision. Prints the largest
error / (1 + |ref|) per model and fails on a NaN, on an infinity the reference does not have,
or on an error above 1e-5 * (1 + |ref|).

Needs requirements-ci.txt (onnx, onnxruntime, numpy). Writes nothing.
"""

import json
import math
import sys
from pathlib import Path

import numpy as np
import onnx
import onnxruntime as ort

ort.set_default_logger_severity(3)  # no warnings for the opset-1 and opset-6 models

TOL = 1e-5


def sigmoid(x):
    if x >= 0:
        return 1.0 / (1.0 + math.exp(-x))
    e = math.exp(x)
    return e / (1.0 + e)


def softplus(x):
    return max(x, 0.0) + math.log1p(math.exp(-abs(x)))


def celu(x, a):
    return x if x >= 0 else a * math.expm1(x / a)


# The formulas of the ONNX operator schemas (Relu ... Swish, Gelu both modes) and of the
# papers for the kinds ONNX has no op for (relu6: Clip(0, 6)).
REFERENCE = {
    "relu": lambda x: max(x, 0.0),
    "relu6": lambda x: min(max(x, 0.0), 6.0),
    "hard_swish": lambda x: x * min(max(x + 3.0, 0.0), 6.0) / 6.0,
    "clip": lambda x, lo, hi: hi if lo > hi else min(max(x, lo), hi),
    "leaky_relu": lambda x, a: x if x >= 0 else a * x,
    "prelu": lambda x, a: x if x >= 0 else a * x,
    "thresholded_relu": lambda x, a: x if x > a else 0.0,
    "elu": lambda x, a: x if x >= 0 else a * math.expm1(x),
    "selu": lambda x, a, g: g * (x if x > 0 else a * math.expm1(x)),
    "celu": celu,
    "sigmoid": sigmoid,
    "hard_sigmoid": lambda x, a, b: max(0.0, min(1.0, a * x + b)),
    "tanh": math.tanh,
    "softplus": softplus,
    "softsign": lambda x: x / (1.0 + abs(x)),
    "silu": lambda x: x * sigmoid(x),
    "swish": lambda x, b: x * sigmoid(b * x),
    "gelu": lambda x: 0.5 * x * math.erfc(-x / math.sqrt(2.0)),
    "gelu_tanh": lambda x: x
    * sigmoid(2.0 * math.sqrt(2.0 / math.pi) * (x + 0.044715 * x * x * x)),
    "mish": lambda x: x * math.tanh(softplus(x)),
}


def check(folder: Path, case: dict) -> list[str]:
    path = folder / case["file"]
    model = onnx.load(str(path))
    onnx.checker.check_model(model, full_check=True)
    session = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    x = np.array(case["x"], dtype=np.float32).reshape(case["shape"])
    (y,) = session.run(None, {"x": x})
    worst, problems = 0.0, []
    for xi, yi, c in zip(x.ravel(), y.ravel(), case["channel"]):
        r = REFERENCE[case["kind"]](float(xi), *case["params"][c])
        r32 = float(np.float32(r)) if abs(r) <= float(np.finfo(np.float32).max) else math.copysign(math.inf, r)
        got = float(yi)
        if math.isnan(got):
            problems.append(f"x = {xi}: NaN, reference {r}")
        elif math.isinf(got) or math.isinf(r32):
            if got != r32:
                problems.append(f"x = {xi}: {got}, want {r32}")
        else:
            err = abs(got - r) / (1.0 + abs(r))
            worst = max(worst, err)
            if err > TOL:
                problems.append(f"x = {xi}: {got}, want {r} (error / (1 + |ref|) {err:.3e})")
    print(f"{case['file']:40} max error / (1 + |ref|) {worst:.3e}  {len(problems)} problem(s)")
    return problems


def main() -> int:
    folder = Path(sys.argv[1])
    failed = 0
    for line in (folder / "cases.jsonl").read_text().splitlines():
        problems = check(folder, json.loads(line))
        for p in problems[:4]:
            print("    " + p)
        failed += bool(problems)
    print(f"onnx {onnx.__version__}, onnxruntime {ort.__version__}: {failed} model(s) failed")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
