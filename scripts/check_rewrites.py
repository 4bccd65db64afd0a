"""Checks models rewritten by `actswap swap` against the ONNX standard's own tools.

For every torch fixture (tests/fixtures/torch, see its manifest) and several conversions, the
rewritten model must pass onnx.checker.check_model(full_check=True), and onnxruntime and tract
(through actswap's runner, examples/tract_outputs.rs) must give the same outputs on the fixture's
recorded inputs, within 1e-4 + 1e-4*|ort|. Exact conversions must also agree with onnxruntime's
outputs for the original model within the same tolerance.

Pinned versions: scripts/requirements-ci.txt. Needs the built binaries:
    cargo build --bin actswap --example tract_outputs
    python3 scripts/check_rewrites.py [TARGET_DIR]
"""

import json
import os
import subprocess
import sys
import tempfile

import numpy as np
import onnx
import onnxruntime as ort

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
TARGET = sys.argv[1] if len(sys.argv) > 1 else os.environ.get("CARGO_TARGET_DIR", os.path.join(ROOT, "target"))
ACTSWAP = os.path.join(TARGET, "debug", "actswap")
TRACT_OUTPUTS = os.path.join(TARGET, "debug", "examples", "tract_outputs")
TOL = 1e-4

# (arguments, exact): exact conversions must also match the original model's outputs.
CONVERSIONS = [
    (["--to", "*=primitive"], True),
    (["--to", "*=fused"], True),
    (["--target", "core-opset13"], True),
    (["--target", "fused-latest"], True),
    (["--target", "piecewise-linear"], False),
    (["--to", "silu=hard_swish", "--to", "gelu=gelu_tanh"], False),
]


def ort_outputs(path, feeds):
    sess = ort.InferenceSession(path, providers=["CPUExecutionProvider"])
    names = [o.name for o in sess.get_outputs()]
    return dict(zip(names, sess.run(names, feeds)))


def worst(a, b):
    a, b = np.asarray(a, np.float64), np.asarray(b, np.float64)
    excess = np.abs(a - b) - (TOL + TOL * np.abs(b))
    return float(excess.max()) if excess.size else 0.0


def main():
    manifest = json.load(open(os.path.join(ROOT, "tests/fixtures/torch/manifest.json")))
    failures, checked = [], 0
    with tempfile.TemporaryDirectory() as tmp:
        for m in manifest["models"]:
            if m.get("skipped"):
                continue
            folder = os.path.join(ROOT, "tests/fixtures/torch", m["id"])
            src = os.path.join(folder, "model.onnx")
            inputs = os.path.join(folder, "inputs.npz")
            feeds = dict(np.load(inputs))
            original = ort_outputs(src, feeds)
            for k, (args, exact) in enumerate(CONVERSIONS):
                out = os.path.join(tmp, f"{m['id']}-{k}.onnx")
                # --write-failing: a conversion the target cannot fully serve (exit 1) is still checked.
                run = subprocess.run(
                    [ACTSWAP, "swap", src, "-o", out, "--write-failing", *args], capture_output=True, text=True
                )
                label = f"{m['id']} {' '.join(args)}"
                if run.returncode not in (0, 1) or not os.path.exists(out):
                    failures.append(f"{label}: swap exited {run.returncode}: {run.stderr.strip()}")
                    continue
                try:
                    onnx.checker.check_model(onnx.load(out), full_check=True)
                except Exception as e:  # the checker's own exception types vary by version
                    failures.append(f"{label}: onnx.checker: {e}")
                    continue
                rewritten = ort_outputs(out, feeds)
                tract_npz = os.path.join(tmp, f"{m['id']}-{k}.npz")
                t = subprocess.run([TRACT_OUTPUTS, out, inputs, tract_npz], capture_output=True, text=True)
                if t.returncode != 0:
                    failures.append(f"{label}: tract: {t.stderr.strip()}")
                    continue
                tract = dict(np.load(tract_npz))
                for name, value in rewritten.items():
                    if worst(tract[name], value) > 0:
                        failures.append(f"{label}: output {name}: tract and onnxruntime differ")
                    if exact and worst(value, original[name]) > 0:
                        failures.append(f"{label}: output {name}: exact conversion moved the output")
                checked += 1
    for f in failures:
        print("FAIL", f)
    print(f"{checked - len(failures)} passed, {len(failures)} failed")
    return 1 if failures or checked == 0 else 0


if __name__ == "__main__":
    sys.exit(main())
