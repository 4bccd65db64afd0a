#!/usr/bin/env python3
"""Check the sample models in sample-models/ against outside references.

The models and sample-models/manifest.json are written by
`cargo run --example make_samples`. For every model the manifest lists:

- the onnx checker accepts it with full_check=True (strict shape inference),
  and its IR version is at least onnx.helper.find_min_ir_version_for(opsets);
- no graph (main or subgraph) carries value_info, node names are unique across
  all graphs, and every site's nodes exist in its graph with the listed op types;
- onnxruntime runs it on seeded standard-normal inputs (batch 2), as drawn and
  shifted by +0.5 and -0.5 (which drive door-chime's If down each branch), and the
  output shapes are those the manifest gives;
- every site's output equals its activation's formula, evaluated in float64 on the
  site's own onnxruntime input (rtol 1e-4, atol 2e-5, as scripts/gen_torch.py
  asks), with graph optimisations disabled; a site inside an If branch is
  compared at the If's output on the runs that took its branch;
- every near miss differs from each kind it imitates by more than 1e-3.

It prints each model's output shapes and each site's input range, RMS and share
within -4..4 on the unshifted input (the generator scales weights so that 99% of
each activation's input lies within -4..4).
Needs requirements-ci.txt. Exits 1 on any failure.

Usage: python3 scripts/check_samples.py
"""

import json
import math
import sys
import tempfile
from pathlib import Path

import numpy as np
import onnx
import onnxruntime as ort
from onnx import TensorProto, helper

from onnx_info import ROOT, versions

SAMPLES = ROOT / "sample-models"
INPUT_SEED = 2024
BATCH = 2
SHIFTS = (0.0, 0.5, -0.5)
REF_RTOL, REF_ATOL = 1e-4, 2e-5
NEAR_MISS_MIN_DIFF = 1e-3


# ---------------------------------------------------------------- formulas
# Evaluated in float64. Sources: the ONNX operator specification
# (onnx/defs/math/defs.cc) for the ops, and the papers named beside the composites.
def _sigmoid(x):
    return 0.5 * (1.0 + np.tanh(0.5 * x))  # equal to 1/(1+exp(-x)), no overflow


def _softplus(x):
    return np.maximum(x, 0.0) + np.log1p(np.exp(-np.abs(x)))


_erf = np.vectorize(math.erf)


def _channel(v, ndim):
    """Per-channel parameter list -> array broadcasting on axis 1."""
    a = np.asarray(v, dtype=np.float64)
    return a.reshape((1, -1) + (1,) * (ndim - 2)) if a.ndim else a


def reference(kind, p, x):
    if kind == "relu":  # ONNX Relu
        return np.maximum(x, 0.0)
    if kind == "relu6":  # ONNX Clip
        return np.clip(x, p["min"], p["max"])
    if kind == "leaky_relu":  # ONNX LeakyRelu
        return np.where(x < 0, p["alpha"] * x, x)
    if kind == "prelu":  # ONNX PRelu
        return np.where(x < 0, _channel(p["slope"], x.ndim) * x, x)
    if kind == "elu":  # ONNX Elu; Clevert et al. 2015 (arXiv:1511.07289)
        return np.where(x < 0, p["alpha"] * np.expm1(x), x)
    if kind == "selu":  # ONNX Selu; Klambauer et al. 2017 (arXiv:1706.02515)
        return p["gamma"] * np.where(x <= 0, p["alpha"] * np.expm1(x), x)
    if kind == "celu":  # ONNX Celu
        return np.maximum(0.0, x) + np.minimum(0.0, p["alpha"] * np.expm1(x / p["alpha"]))
    if kind == "thresholded_relu":  # ONNX ThresholdedRelu
        return np.where(x > p["alpha"], x, 0.0)
    if kind == "sigmoid":  # ONNX Sigmoid
        return _sigmoid(x)
    if kind == "hard_sigmoid":  # ONNX HardSigmoid
        return np.clip(p["alpha"] * x + p["beta"], 0.0, 1.0)
    if kind == "tanh":  # ONNX Tanh
        return np.tanh(x)
    if kind == "softplus":  # ONNX Softplus
        return _softplus(x)
    if kind == "softsign":  # ONNX Softsign
        return x / (1.0 + np.abs(x))
    if kind == "silu":  # Elfwing et al. 2017 (arXiv:1702.03118)
        return x * _sigmoid(x)
    if kind == "swish":  # Ramachandran et al. 2017 (arXiv:1710.05941); ONNX Swish
        return x * _sigmoid(_channel(p.get("beta", 1.0), x.ndim) * x)
    if kind == "hard_swish":  # Howard et al. 2019 (arXiv:1905.02244); ONNX HardSwish
        return x * np.clip(x / 6.0 + 0.5, 0.0, 1.0)
    if kind == "gelu":  # Hendrycks & Gimpel 2016 (arXiv:1606.08415); ONNX Gelu
        return 0.5 * x * (1.0 + _erf(x / math.sqrt(2.0)))
    if kind == "gelu_tanh":  # the same paper's tanh approximation; ONNX Gelu approximate=tanh
        return 0.5 * x * (1.0 + np.tanh(math.sqrt(2.0 / math.pi) * (x + 0.044715 * x**3)))
    if kind == "mish":  # Misra 2019 (arXiv:1908.08681); ONNX Mish
        return x * np.tanh(_softplus(x))
    raise KeyError(kind)


# ---------------------------------------------------------------- structure
def graphs(model):
    """path -> GraphProto for the main graph and every subgraph, paths as in the manifest."""
    out = {}

    def walk(g, path):
        out[path] = g
        for n in g.node:
            for a in n.attribute:
                if a.type == onnx.AttributeProto.GRAPH:
                    walk(a.g, f"{path}/{n.name}.{a.name}")

    walk(model.graph, "main")
    return out


def check_structure(model, entry):
    opsets = [helper.make_opsetid(o.domain, o.version) for o in model.opset_import]
    min_ir = helper.find_min_ir_version_for(opsets)
    assert model.ir_version >= min_ir, f"IR {model.ir_version} < {min_ir}"
    assert model.ir_version == entry["ir_version"] and opsets[0].version == entry["opset"]
    gs = graphs(model)
    names = [n.name for g in gs.values() for n in g.node]
    assert all(names) and len(names) == len(set(names)), "node names missing or repeated"
    for path, g in gs.items():
        assert not g.value_info, f"{path} has value_info"
    for s in entry["sites"] + entry["near_misses"]:
        g = gs[s["graph"]]
        by_name = {n.name: n for n in g.node}
        ops = [by_name[n].op_type for n in s["nodes"]]
        assert ops == s["pattern"], (s["nodes"], ops, s["pattern"])
        assert s["output"] in by_name[s["nodes"][-1]].output


def branch_owner(model, path):
    """For a subgraph path `main/<node>.<attribute>`: the If node and the attribute."""
    node_name, attribute = path.split("/", 1)[1].rsplit(".", 1)
    node = next(n for n in model.graph.node if n.name == node_name)
    return node, attribute


# ---------------------------------------------------------------- running
def session(model, extra_outputs, optimize):
    m = onnx.ModelProto()
    m.CopyFrom(model)
    inferred = onnx.shape_inference.infer_shapes(model).graph.value_info
    elem = {v.name: v.type.tensor_type.elem_type for v in inferred}
    present = {o.name for o in m.graph.output}
    for t in extra_outputs:
        if t not in present:
            dt = elem.get(t, TensorProto.FLOAT)
            m.graph.output.append(helper.make_tensor_value_info(t, dt, None))
            present.add(t)
    opts = ort.SessionOptions()
    if not optimize:
        opts.graph_optimization_level = ort.GraphOptimizationLevel.ORT_DISABLE_ALL
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "with-sites.onnx"
        onnx.save(m, str(p))
        return ort.InferenceSession(str(p), opts, providers=["CPUExecutionProvider"])


def rms(x):
    return float(np.sqrt(np.mean(x * x)))


def concrete(shape):
    return [BATCH if d == "batch" else d for d in shape]


def check_model(entry):
    path = SAMPLES / entry["file"]
    model = onnx.load(str(path))
    onnx.checker.check_model(model, full_check=True)
    check_structure(model, entry)
    assert path.stat().st_size == entry["file_bytes"], "file size differs from the manifest"

    (inp,) = entry["inputs"]
    rng = np.random.default_rng(INPUT_SEED)
    base = rng.standard_normal(concrete(inp["shape"])).astype(np.float32)
    out_names = [o["name"] for o in entry["outputs"]]

    # Tensors to fetch: main-graph site tensors, and for branch sites the If output
    # and condition.
    fetch, branch = [], {}
    for s in entry["sites"] + entry["near_misses"]:
        ins = s["inputs"] if "inputs" in s else [s["input"]]
        if s["graph"] == "main":
            fetch += ins + [s["output"]]
            continue
        node, attribute = branch_owner(model, s["graph"])
        sub = next(a.g for a in node.attribute if a.name == attribute)
        ix = [o.name for o in sub.output].index(s["output"])
        branch[id(s)] = (node.output[ix], node.input[0], attribute == "then_branch")
        fetch += ins + [node.output[ix], node.input[0]]
    fetch = list(dict.fromkeys(fetch))

    plain = session(model, [], optimize=True)
    probe = session(model, fetch, optimize=False)
    ranges, checked = {}, {s["id"]: 0 for s in entry["sites"]}
    shapes = None
    for shift in SHIFTS:
        x = base + np.float32(shift)
        outs = plain.run(out_names, {inp["name"]: x})
        shapes = [list(o.shape) for o in outs]
        expected = [concrete(o["shape"]) for o in entry["outputs"]]
        assert shapes == expected, (shapes, expected)
        assert all(np.isfinite(o).all() for o in outs)
        vals = dict(zip(fetch, probe.run(fetch, {inp["name"]: x})))
        for s in entry["sites"]:
            xs = vals[s["input"]].astype(np.float64)
            if shift == 0.0:
                inside = float(np.mean(np.abs(xs) <= 4.0))
                ranges[s["id"]] = (float(xs.min()), float(xs.max()), rms(xs), inside)
            if s["graph"] == "main":
                y = vals[s["output"]]
            else:
                out, cond, when = branch[id(s)]
                if bool(vals[cond]) != when:
                    continue
                y = vals[out]
            ref = reference(s["kind"], s["params"], xs)
            err = float(np.max(np.abs(y.astype(np.float64) - ref)))
            if not np.allclose(y, ref, rtol=REF_RTOL, atol=REF_ATOL):
                raise AssertionError(f"site {s['id']} ({s['kind']}) is off its formula by {err:.3g}")
            checked[s["id"]] += 1
        for m in entry["near_misses"]:
            y = vals[m["output"]].astype(np.float64)
            for kind in m["not_kinds"]:
                for name in m["inputs"]:
                    d = float(np.max(np.abs(y - reference(kind, {}, vals[name].astype(np.float64)))))
                    assert d > NEAR_MISS_MIN_DIFF, f"near miss {m['output']} equals {kind}({name})"
    unchecked = [k for k, n in checked.items() if n == 0]
    assert not unchecked, f"sites never evaluated: {unchecked}"
    return shapes, ranges


def main():
    manifest = json.loads((SAMPLES / "manifest.json").read_text())
    listed = {m["file"] for m in manifest["models"]}
    on_disk = {p.name for p in SAMPLES.glob("*.onnx")}
    print("versions:", json.dumps(versions()))
    failures = 0
    if listed != on_disk:
        print(f"FAIL manifest lists {sorted(listed)} but the folder holds {sorted(on_disk)}")
        failures += 1
    for entry in manifest["models"]:
        try:
            shapes, ranges = check_model(entry)
        except Exception as e:  # report every model, then fail
            failures += 1
            print(f"FAIL {entry['file']}: {type(e).__name__}: {e}")
            continue
        outs = ", ".join(f"{o['name']} {s}" for o, s in zip(entry["outputs"], shapes))
        print(f"ok   {entry['file']}: checker full_check, onnxruntime -> {outs}")
        for s in entry["sites"]:
            lo, hi, r, inside = ranges[s["id"]]
            print(f"       {s['id']} {s['kind']:<16} {s['form']:<10} input {s['input']:<12} "
                  f"range {lo:+.2f}..{hi:+.2f}  rms {r:.2f}  within -4..4 {inside:.0%}")
    total = len(manifest["models"])
    print(f"{total - failures} passed, {failures} failed")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
