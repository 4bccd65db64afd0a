#!/usr/bin/env python3
"""Export small seeded torch models to ONNX and record their true activation sites.

Not run in CI (needs torch: pip install -r scripts/requirements-torch.txt).
Its outputs are committed under tests/fixtures/torch/ so tests run offline.

Three invented scenarios, each a chain of small layers with one activation
(or one gated block) after each layer:
  leaf-spot    greenhouse leaf-spot detector, Conv2d on [1,3,16,16]
  pump         pump-vibration fault scorer, Linear MLP on [4,32]
  door-chime   door-chime keyword spotter, Conv1d on [1,8,64]
Each is exported with the TorchScript exporter (dynamo=False) at opsets
11, 13, 17 and with the dynamo exporter at opsets 18 and 20, with its default
graph optimisation and once more with optimize=False (the raw translation).
One more model, hard-sigmoid-default, is built with onnx.helper because torch
only emits HardSigmoid with alpha=1/6.

Truth: the sites are found from the torch side, not by pattern matching.
Every layer (Conv/Gemm/MatMul) is located in the ONNX graph by its weight
values; the nodes between one block's layer output and the next block's layer
input form the block's region. Each site's onnxruntime values are then checked
against the activation's published formula (evaluated in float64 on the
site's own onnxruntime input), so a wrong region or parameter fails the script.

Per model folder: model.onnx (exactly as exported), inputs.npz, outputs.npz
(onnxruntime, default session options) and site_values.npz (onnxruntime with
graph optimisations disabled, on a temporary copy that lists every site tensor
as an extra graph output; keys are mapped to tensor names in the manifest).

Usage: python3 scripts/gen_torch.py
"""

import math
import re
import shutil
import sys
import tempfile
import warnings
from pathlib import Path

import numpy as np
import onnx
import onnx_ir
import onnxruntime as ort
import onnxscript
import torch
import torch.nn as nn
import torch.nn.functional as F
from onnx import TensorProto, helper, numpy_helper

from onnx_info import (ROOT, file_figures, info_figures, node_attributes, save_npz,
                       versions, write_json)

OUT = ROOT / "tests" / "fixtures" / "torch"
GENERATOR = "scripts/gen_torch.py"
TORCH_SEED = 1234
INPUT_SEED = 4321
# (exporter id, dynamo flag, opset, dynamo optimize flag)
EXPORTS = [
    ("ts", False, 11, None),
    ("ts", False, 13, None),
    ("ts", False, 17, None),
    ("dynamo", True, 18, True),
    ("dynamo", True, 20, True),
    ("dynamo-noopt", True, 18, False),
    ("dynamo-noopt", True, 20, False),
]
# Agreement asked of onnxruntime (float32) against the float64 formula.
REF_RTOL, REF_ATOL = 1e-4, 2e-5

FUSED_OP = {
    "relu": "Relu", "relu6": "Clip", "clip": "Clip", "leaky_relu": "LeakyRelu",
    "prelu": "PRelu", "thresholded_relu": "ThresholdedRelu", "elu": "Elu",
    "selu": "Selu", "celu": "Celu", "sigmoid": "Sigmoid", "hard_sigmoid": "HardSigmoid",
    "tanh": "Tanh", "softplus": "Softplus", "softsign": "Softsign", "silu": "Swish",
    "swish": "Swish", "hard_swish": "HardSwish", "gelu": "Gelu", "gelu_tanh": "Gelu",
    "mish": "Mish",
}
ACTIVATION_OPS = set(FUSED_OP.values()) | {"Swish"}


# ---------------------------------------------------------------- formulas
# Each is evaluated in float64. Sources: ONNX operator specification
# (onnx/defs/math/defs.cc) for the ops; papers for the composites.
def _sigmoid(x):
    return 0.5 * (1.0 + np.tanh(0.5 * x))  # equal to 1/(1+exp(-x)), no overflow


def _softplus(x):
    return np.maximum(x, 0.0) + np.log1p(np.exp(-np.abs(x)))


_erf = np.vectorize(math.erf)


def _channel(v, ndim):
    """Per-channel parameter list -> array broadcasting on axis 1."""
    a = np.asarray(v, dtype=np.float64)
    return a.reshape((1, -1) + (1,) * (ndim - 2)) if a.ndim else a


def reference(kind, params, x):
    p = params
    if kind == "relu":
        return np.maximum(x, 0.0)
    if kind in ("relu6", "clip"):
        return np.clip(x, p["min"], p["max"])
    if kind == "leaky_relu":
        return np.where(x < 0, p["alpha"] * x, x)
    if kind == "prelu":
        s = _channel(p["slope"], x.ndim)
        return np.where(x < 0, s * x, x)
    if kind == "elu":
        return np.where(x < 0, p["alpha"] * np.expm1(x), x)
    if kind == "selu":
        return p["gamma"] * np.where(x <= 0, p["alpha"] * np.expm1(x), x)
    if kind == "celu":
        return np.maximum(0.0, x) + np.minimum(0.0, p["alpha"] * np.expm1(x / p["alpha"]))
    if kind == "sigmoid":
        return _sigmoid(x)
    if kind == "hard_sigmoid":
        return np.clip(p["alpha"] * x + p["beta"], 0.0, 1.0)
    if kind == "tanh":
        return np.tanh(x)
    if kind == "softplus":  # torch keeps x above its threshold
        return np.where(x * p["beta"] > p["threshold"], x, _softplus(p["beta"] * x) / p["beta"])
    if kind == "softsign":
        return x / (1.0 + np.abs(x))
    if kind == "silu":
        return x * _sigmoid(x)
    if kind == "swish":
        b = _channel(p["beta"], x.ndim)
        return x * _sigmoid(b * x)
    if kind == "hard_swish":
        return x * np.clip(x / 6.0 + 0.5, 0.0, 1.0)
    if kind == "gelu":
        return 0.5 * x * (1.0 + _erf(x / math.sqrt(2.0)))
    if kind == "gelu_tanh":
        return 0.5 * x * (1.0 + np.tanh(math.sqrt(2.0 / math.pi) * (x + 0.044715 * x ** 3)))
    if kind == "mish":
        return x * np.tanh(_softplus(x))
    raise KeyError(kind)


SOURCES = {
    "relu": "ONNX Relu", "relu6": "ONNX Clip (min 0, max 6)", "clip": "ONNX Clip",
    "leaky_relu": "ONNX LeakyRelu", "prelu": "ONNX PRelu", "elu": "ONNX Elu; Clevert et al. 2015",
    "selu": "ONNX Selu; Klambauer et al. 2017", "celu": "ONNX Celu",
    "sigmoid": "ONNX Sigmoid", "hard_sigmoid": "ONNX HardSigmoid", "tanh": "ONNX Tanh",
    "softplus": "ONNX Softplus; torch.nn.Softplus threshold rule (PyTorch docs)",
    "softsign": "ONNX Softsign", "silu": "Elfwing et al. 2017 (arXiv:1702.03118)",
    "swish": "Ramachandran et al. 2017 (arXiv:1710.05941)",
    "hard_swish": "Howard et al. 2019 (arXiv:1905.02244); ONNX HardSwish",
    "gelu": "Hendrycks & Gimpel 2016 (arXiv:1606.08415); ONNX Gelu",
    "gelu_tanh": "Hendrycks & Gimpel 2016 tanh approximation; ONNX Gelu approximate=tanh",
    "mish": "Misra 2019 (arXiv:1908.08681); ONNX Mish",
}


# ---------------------------------------------------------------- modules
def f32(v):
    """The float32 value the exported file holds for a Python scalar."""
    return float(np.float32(v))


class ScaledSwish(nn.Module):
    """x * sigmoid(b * x) with b a Python scalar."""

    def __init__(self, b):
        super().__init__()
        self.b = b

    def forward(self, x):
        return x * torch.sigmoid(self.b * x)


class ChannelSwish(nn.Module):
    """x * sigmoid(b * x) with b a learnable per-channel parameter [1, C, 1(, 1)]."""

    def __init__(self, channels, spatial_dims):
        super().__init__()
        shape = (1, channels) + (1,) * spatial_dims
        self.beta = nn.Parameter(0.5 + 1.5 * torch.rand(shape))

    def forward(self, x):
        return x * torch.sigmoid(self.beta * x)


class SigmoidFirstSiLU(nn.Module):
    """sigmoid(x) * x: SiLU written with the operands the other way round."""

    def forward(self, x):
        return torch.sigmoid(x) * x


class WrongConstantGelu(nn.Module):
    """0.5 * x * (1 + erf(x / 1.3)): GELU's shape with the wrong divisor (not GELU)."""

    def forward(self, x):
        return 0.5 * x * (1.0 + torch.erf(x / 1.3))


def gate_sigmoid(a, g):
    return a * torch.sigmoid(g)


def gate_scaled_sigmoid(a, g):
    return a * torch.sigmoid(0.75 * g)


def swiglu(a, b):
    return F.silu(a) * b


class Chain(nn.Module):
    """layer then activation; `spec` holds the activation's truth."""

    def __init__(self, name, layer, act, spec):
        super().__init__()
        self.name, self.layer, self.act, self.spec = name, layer, act, spec

    def forward(self, h):
        return self.act(self.layer(h))


class Gate(nn.Module):
    """Two layers on the same input combined by `fn` (gating, SwiGLU)."""

    def __init__(self, name, layer_a, layer_b, fn, spec):
        super().__init__()
        self.name, self.layer_a, self.layer_b, self.fn, self.spec = (
            name, layer_a, layer_b, fn, spec)

    def forward(self, h):
        return self.fn(self.layer_a(h), self.layer_b(h))


class Net(nn.Module):
    def __init__(self, blocks, head):
        super().__init__()
        self.blocks = nn.ModuleList(blocks)
        self.head = head

    def forward(self, x):
        for b in self.blocks:
            x = b(x)
        return self.head(x)


def chain(name, layer, act, kind, params=None):
    """A true site of `kind`; with kind None, `params` describes a near miss."""
    spec = {"kind": kind, "params": params or {}} if kind else dict(params)
    return Chain(name, layer, act, spec)


def leaf_spot():
    c = 8

    def conv(k=1, cin=c):
        return nn.Conv2d(cin, c, k, padding=k // 2)

    swish_c = ChannelSwish(c, 2)
    prelu = nn.PReLU(c, init=0.2)
    with torch.no_grad():
        prelu.weight.copy_(0.05 + 0.3 * torch.rand(c))
    blocks = [
        chain("stem", conv(3, 3), nn.SiLU(), "silu"),
        chain("swish_1702", conv(), ScaledSwish(1.702), "swish", {"beta": f32(1.702)}),
        chain("swish_075", conv(), ScaledSwish(0.75), "swish", {"beta": f32(0.75)}),
        chain("swish_channel", conv(), swish_c, "swish", {"beta": "param:beta"}),
        chain("hardswish", conv(), nn.Hardswish(), "hard_swish"),
        chain("relu6", conv(), nn.ReLU6(), "relu6", {"min": 0.0, "max": 6.0}),
        chain("mish", conv(), nn.Mish(), "mish"),
        chain("hardsigmoid", conv(), nn.Hardsigmoid(), "hard_sigmoid",
              {"alpha": f32(1.0 / 6.0), "beta": 0.5}),
        chain("prelu", conv(), prelu, "prelu", {"slope": "param:weight"}),
        Gate("gate", conv(), conv(), gate_sigmoid,
             {"near_miss": ["silu", "swish"], "reason": "x*sigmoid(y): y is another tensor"}),
        Gate("gate_scaled", conv(), conv(), gate_scaled_sigmoid,
             {"near_miss": ["silu", "swish"], "reason": "x*sigmoid(0.75*y): y is another tensor"}),
    ]
    return Net(blocks, nn.Conv2d(c, 2, 1)), {"leaf_image": (1, 3, 8, 8)}, ["spot_logits"]


def pump():
    w = 16

    def fc(cin=w):
        return nn.Linear(cin, w)

    blocks = [
        chain("gelu", fc(32), nn.GELU(), "gelu"),
        chain("gelu_tanh", fc(), nn.GELU(approximate="tanh"), "gelu_tanh"),
        chain("leaky", fc(), nn.LeakyReLU(0.1), "leaky_relu", {"alpha": f32(0.1)}),
        chain("elu", fc(), nn.ELU(0.7), "elu", {"alpha": f32(0.7)}),
        chain("softplus", fc(), nn.Softplus(), "softplus", {"beta": 1.0, "threshold": 20.0}),
        chain("selu", fc(), nn.SELU(), "selu",
              {"alpha": 1.6732632423543772848170429916717,
               "gamma": 1.0507009873554804934193349852946}),
        chain("celu", fc(), nn.CELU(1.3), "celu", {"alpha": f32(1.3)}),
        chain("softsign", fc(), nn.Softsign(), "softsign"),
        chain("hardtanh", fc(), nn.Hardtanh(-2.0, 2.0), "clip", {"min": -2.0, "max": 2.0}),
        chain("wrong_gelu", fc(), WrongConstantGelu(), None,
              {"near_miss": ["gelu", "gelu_tanh"], "reason": "divisor 1.3 instead of sqrt(2)"}),
        Gate("swiglu", fc(), fc(), swiglu,
             {"near_miss": ["silu", "swish"],
              "reason": "silu(a)*b: only silu(a) is an activation; the product gates b"}),
        chain("gelu_again", fc(), nn.GELU(), "gelu"),
    ]
    return Net(blocks, nn.Linear(w, 3)), {"vibration": (4, 32)}, ["fault_scores"]


def door_chime():
    c = 8

    def conv(k=3):
        return nn.Conv1d(c, c, k, padding=k // 2)

    blocks = [
        chain("silu_reversed", conv(), SigmoidFirstSiLU(), "silu"),
        chain("swish_channel", conv(), ChannelSwish(c, 1), "swish", {"beta": "param:beta"}),
        chain("relu", conv(), nn.ReLU(), "relu"),
        chain("tanh", conv(), nn.Tanh(), "tanh"),
        chain("sigmoid", conv(), nn.Sigmoid(), "sigmoid"),
        chain("gelu_tanh", conv(), nn.GELU(approximate="tanh"), "gelu_tanh"),
        chain("mish", conv(), nn.Mish(), "mish"),
        chain("silu", conv(), nn.SiLU(), "silu"),
    ]
    return Net(blocks, nn.Conv1d(c, 2, 1)), {"audio_frames": (1, 8, 64)}, ["chime_logits"]


SCENARIOS = [
    ("leaf-spot", "greenhouse leaf-spot detector (Conv2d)", leaf_spot),
    ("pump", "pump-vibration fault scorer (Linear MLP)", pump),
    ("door-chime", "door-chime keyword spotter (Conv1d)", door_chime),
]


# ---------------------------------------------------------------- graph walking
class Graph:
    def __init__(self, model):
        g = model.graph
        self.nodes = list(g.node)
        self.producer = {o: i for i, n in enumerate(self.nodes) for o in n.output if o}
        self.consumers = {}
        for i, n in enumerate(self.nodes):
            for t in n.input:
                if t:
                    self.consumers.setdefault(t, []).append(i)
        self.inits = {t.name: numpy_helper.to_array(t) for t in g.initializer}
        self.graph_inputs = {v.name for v in g.input}
        self.graph_outputs = [v.name for v in g.output]

    def const_value(self, name):
        """Value of an initializer or Constant output, else None."""
        if name in self.inits:
            return self.inits[name]
        i = self.producer.get(name)
        if i is not None and self.nodes[i].op_type == "Constant":
            attr = self.nodes[i].attribute[0]
            if attr.name == "value":
                return numpy_helper.to_array(attr.t)
            return np.array(onnx.helper.get_attribute_value(attr))
        return None

    def find_layer(self, layer):
        """(node index, output tensor, data input tensor) of a torch layer."""
        w = layer.weight.detach().numpy()
        for i, n in enumerate(self.nodes):
            if n.op_type not in ("Conv", "Gemm", "MatMul") or len(n.input) < 2:
                continue
            v = self.const_value(n.input[1])
            if v is None or v.size != w.size:
                continue
            if not (_same(v, w) or (v.ndim == 2 and _same(v.T, w))):
                continue
            out = n.output[0]
            if n.op_type == "MatMul":  # bias as a following Add
                for j in self.consumers.get(out, []):
                    if self.nodes[j].op_type == "Add":
                        out = self.nodes[j].output[0]
            return i, out, n.input[0]
        raise LookupError(f"layer with weight shape {tuple(w.shape)} not found")

    def region(self, inputs, output):
        """Nodes computing `output` from `inputs`, split into compute and constant nodes."""
        inputs = set(inputs)
        back, stack = set(), [output]
        while stack:
            t = stack.pop()
            if t in inputs or t not in self.producer:
                continue
            i = self.producer[t]
            if i not in back:
                back.add(i)
                stack.extend(x for x in self.nodes[i].input if x)
        fwd, stack = set(), list(inputs)
        while stack:
            t = stack.pop()
            for j in self.consumers.get(t, []):
                if j not in fwd:
                    fwd.add(j)
                    stack.extend(self.nodes[j].output)
        compute = sorted(back & fwd)
        constant = sorted(back - fwd)
        for i in constant:
            for x in self.nodes[i].input:
                if x and x not in self.inits and x not in self.producer:
                    raise ValueError(f"region of {output} reads {x} outside its inputs")
        return compute, constant

    def constants_read(self, compute, constant):
        """Constant tensors (initializers / constant-node outputs) the region reads."""
        inside = {o for i in compute + constant for o in self.nodes[i].output}
        names = {x for i in compute + constant for x in self.nodes[i].input
                 if x and x not in inside and self.const_value(x) is not None}
        return sorted(names)

    def readers_outside(self, tensor, members):
        return [j for j in self.consumers.get(tensor, []) if j not in members]


def _same(a, b):
    return a.shape == b.shape and np.array_equal(a.astype(np.float32), b.astype(np.float32))


def resolve_params(spec_params, module):
    out = {}
    for k, v in spec_params.items():
        if isinstance(v, str) and v.startswith("param:"):
            t = getattr(module, v.split(":", 1)[1]).detach().numpy().astype(np.float32)
            out[k] = [float(x) for x in t.ravel()]
        else:
            out[k] = v
    return out


# ---------------------------------------------------------------- per model
def site_entry(g, sid, block, kind, params, x_in, y_out, compute, constant):
    members = set(compute) | set(constant)
    consts = g.constants_read(compute, constant)
    shared = []
    for name in consts:
        users = set(g.consumers.get(name, []))
        if users - members:
            shared.append(name)
    const_nodes = []
    for i in constant:
        outs = [o for o in g.nodes[i].output if o]
        outside = any(g.readers_outside(o, members) for o in outs)
        const_nodes.append({"name": g.nodes[i].name, "index": i,
                            "op_type": g.nodes[i].op_type, "shared": outside})
    ops = [g.nodes[i].op_type for i in compute]
    fused = len(compute) == 1 and ops[0] == FUSED_OP[kind]
    nested = [g.nodes[i].name or g.nodes[i].output[0] for i in compute
              if not fused and g.nodes[i].op_type in ACTIVATION_OPS]
    return {
        "id": sid,
        "block": block,
        "kind": kind,
        "params": params,
        "form": "fused" if fused else "decomposed",
        "pattern": ops,
        "nodes": [g.nodes[i].name for i in compute],
        "node_indices": compute,
        "fused_attributes": node_attributes(g.nodes[compute[0]]) if fused else None,
        "constant_nodes": const_nodes,
        "constants": consts,
        "shared_constants": shared,
        "nested_activation_nodes": nested,
        "input": x_in,
        "output": y_out,
        "source": SOURCES[kind],
    }


def truth(g, net):
    """Walk the exported graph block by block; return (sites, near_misses)."""
    layers = []  # per block: (input tensors of its region, data input of its layer)
    for b in net.blocks:
        if isinstance(b, Gate):
            _, oa, xa = g.find_layer(b.layer_a)
            _, ob, _ = g.find_layer(b.layer_b)
            layers.append(((oa, ob), xa))
        else:
            _, o, x = g.find_layer(b.layer)
            layers.append(((o,), x))
    _, _, head_in = g.find_layer(net.head)
    ends = [x for _, x in layers[1:]] + [head_in]

    sites, misses = [], []
    for b, (starts, _), end in zip(net.blocks, layers, ends):
        compute, constant = g.region(starts, end)
        spec = b.spec
        if isinstance(b, Chain) and spec.get("kind"):
            params = resolve_params(spec["params"], b.act)
            sites.append(site_entry(g, f"s{len(sites):02d}", b.name, spec["kind"], params,
                                    starts[0], end, compute, constant))
            continue
        # near misses: record them, plus any true site inside
        misses.append({
            "block": b.name,
            "not_kinds": spec["near_miss"],
            "reason": spec["reason"],
            "inputs": list(starts),
            "output": end,
            "nodes": [g.nodes[i].name for i in compute],
            "node_indices": compute,
            "pattern": [g.nodes[i].op_type for i in compute],
        })
        if isinstance(b, Gate):
            for inner in inner_sites(g, b, starts, compute, constant):
                kind, x_in, y_out = inner
                c2, k2 = g.region([x_in], y_out)
                sites.append(site_entry(g, f"s{len(sites):02d}", b.name, kind, {},
                                        x_in, y_out, c2, k2))
    return sites, misses


def inner_sites(g, block, starts, compute, constant):
    """True activation sites inside a gated block."""
    sig = [i for i in compute if g.nodes[i].op_type == "Sigmoid"]
    assert len(sig) == 1, "one Sigmoid per gated block"
    s = g.nodes[sig[0]]
    if block.fn is swiglu:  # silu(a): Sigmoid(a) and the Mul that reads a and Sigmoid(a)
        a = starts[0]
        assert s.input[0] == a
        muls = [i for i in compute if g.nodes[i].op_type == "Mul"
                and set(g.nodes[i].input) == {a, s.output[0]}]
        assert len(muls) == 1
        return [("silu", a, g.nodes[muls[0]].output[0])]
    return [("sigmoid", s.input[0], s.output[0])]


def session_with_outputs(model_path, tensors):
    """onnxruntime session on a temporary copy that lists `tensors` as graph outputs
    (graph optimisations off, so every listed value is computed as the graph says)."""
    m = onnx.load(str(model_path))
    present = {o.name for o in m.graph.output}
    for t in tensors:
        if t not in present:
            m.graph.output.append(helper.make_tensor_value_info(t, TensorProto.FLOAT, None))
            present.add(t)
    opts = ort.SessionOptions()
    opts.graph_optimization_level = ort.GraphOptimizationLevel.ORT_DISABLE_ALL
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "with-sites.onnx"
        onnx.save(m, str(p))
        return ort.InferenceSession(str(p), opts, providers=["CPUExecutionProvider"])


def check_sites(sites, values):
    for s in sites:
        x = values[s["input"]].astype(np.float64)
        y = values[s["output"]].astype(np.float64)
        ref = reference(s["kind"], s["params"], x)
        err = float(np.max(np.abs(y - ref)))
        ok = bool(np.allclose(y, ref, rtol=REF_RTOL, atol=REF_ATOL))
        s["reference_max_abs_err"] = err
        if not ok:
            raise AssertionError(f"site {s['id']} {s['kind']} disagrees with its formula: {err}")


def check_near_misses(misses, values):
    """The near-miss output must differ from each kind it imitates."""
    for m in misses:
        y = values[m["output"]].astype(np.float64)
        diffs = {}
        for kind in m["not_kinds"]:
            x = values[m["inputs"][-1] if kind in ("silu", "swish") else m["inputs"][0]]
            x = x.astype(np.float64)
            params = {"beta": 1.0} if kind == "swish" else {}
            diffs[kind] = float(np.max(np.abs(y - reference(kind, params, x))))
            assert diffs[kind] > 1e-3, (m["block"], kind, diffs[kind])
        m["max_abs_diff_from_not_kinds"] = diffs


def neutral_path(path):
    """A frame's file path without this machine's directories."""
    p = Path(path)
    if p.is_absolute():
        try:
            return p.resolve().relative_to(ROOT).as_posix()
        except ValueError:
            pass
    parts = p.parts
    for marker in ("site-packages", "dist-packages"):
        if marker in parts:
            return "/".join(parts[parts.index(marker) + 1:])
    for base in (sys.prefix, sys.base_prefix):
        lib = Path(base) / "lib" / f"python{sys.version_info.major}.{sys.version_info.minor}"
        if p.is_relative_to(lib):
            return p.relative_to(lib).as_posix()
    return p.name


def neutral_stack_traces(program):
    """Rewrite the file paths in an ExportedProgram's stack traces (the dynamo
    exporter copies them into node metadata_props) so no machine path is kept."""
    for node in program.graph.nodes:
        trace = node.meta.get("stack_trace")
        if trace:
            node.meta["stack_trace"] = re.sub(
                r'File "([^"]+)"', lambda m: f'File "{neutral_path(m.group(1))}"', trace)
    return program


def export(net, example, names_in, names_out, path, dynamo, opset, optimize):
    kwargs = dict(opset_version=opset, dynamo=dynamo, input_names=names_in,
                  output_names=names_out)
    model = net
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if dynamo:
            # The same capture torch.onnx.export(dynamo=True) makes from a module.
            model = neutral_stack_traces(torch.export.export(net, example, strict=False))
            kwargs.update(optimize=optimize, verbose=False, external_data=False)
        else:
            kwargs.update(do_constant_folding=True)
        torch.onnx.export(model, example, str(path), **kwargs)


def build_model(sid, desc, factory, exporter, dynamo, opset, optimize):
    torch.manual_seed(TORCH_SEED)
    net, input_shapes, names_out = factory()
    net.eval()
    gen = torch.Generator().manual_seed(INPUT_SEED)
    feeds = {k: (3.0 * torch.randn(shape, generator=gen)) for k, shape in input_shapes.items()}
    example = tuple(feeds.values())
    folder = OUT / f"{sid}-{exporter}-op{opset}"
    folder.mkdir(parents=True)
    path = folder / "model.onnx"
    entry = {"id": folder.name, "scenario": sid, "description": desc, "exporter": exporter,
             "dynamo": dynamo, "opset_requested": opset,
             "dynamo_optimize": optimize, "do_constant_folding": None if dynamo else True}
    try:
        export(net, example, list(input_shapes), names_out, path, dynamo, opset, optimize)
    except Exception as e:  # recorded, not fatal
        shutil.rmtree(folder)
        entry["skipped"] = f"{type(e).__name__}: {str(e).splitlines()[0][:200]}"
        return entry
    extra = sorted(p.name for p in folder.iterdir() if p.name != "model.onnx")
    assert not extra, f"exporter wrote more files: {extra}"

    model = onnx.load(str(path))
    g = Graph(model)
    sites, misses = truth(g, net)

    inputs = {k: v.numpy() for k, v in feeds.items()}
    sess = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    outs = dict(zip([o.name for o in sess.get_outputs()], sess.run(None, inputs)))
    with torch.no_grad():
        torch_out = net(*example).numpy()
    torch_diff = float(np.max(np.abs(outs[names_out[0]] - torch_out)))

    tensors = sorted({t for s in sites for t in (s["input"], s["output"])}
                     | {t for m in misses for t in m["inputs"] + [m["output"]]})
    site_sess = session_with_outputs(path, tensors)
    vals = dict(zip([o.name for o in site_sess.get_outputs()], site_sess.run(None, inputs)))
    check_sites(sites, vals)
    check_near_misses(misses, vals)
    keys = {f"t{i:03d}": t for i, t in enumerate(tensors)}

    save_npz(folder / "inputs.npz", inputs)
    save_npz(folder / "outputs.npz", outs)
    save_npz(folder / "site_values.npz", {k: vals[t] for k, t in keys.items()})
    entry.update({
        "files": {"model": "model.onnx", "inputs": "inputs.npz", "outputs": "outputs.npz",
                  "site_values": "site_values.npz"},
        "site_value_keys": keys,
        "torch_vs_onnxruntime_max_abs": torch_diff,
        "sites": sites,
        "near_misses": misses,
        "info": info_figures(model),
    })
    entry.update(file_figures(path))
    return entry


def hard_sigmoid_default():
    """Built with onnx.helper: x * HardSigmoid(x) with the ONNX default alpha 0.2
    (not hard-swish), next to a true HardSigmoid(alpha=1/6) * x hard-swish."""
    folder = OUT / "hard-sigmoid-default-helper-op17"
    folder.mkdir(parents=True)
    third = 1.0 / 6.0
    nodes = [
        helper.make_node("HardSigmoid", ["valve"], ["hs_default"], name="hs_default"),
        helper.make_node("Mul", ["valve", "hs_default"], ["not_hardswish"], name="mul_default"),
        helper.make_node("HardSigmoid", ["not_hardswish"], ["hs_sixth"], name="hs_sixth",
                         alpha=third),
        helper.make_node("Mul", ["not_hardswish", "hs_sixth"], ["valve_level"],
                         name="mul_sixth"),
    ]
    graph = helper.make_graph(
        nodes, "valve_monitor",
        [helper.make_tensor_value_info("valve", TensorProto.FLOAT, [2, 4, 8])],
        [helper.make_tensor_value_info("valve_level", TensorProto.FLOAT, [2, 4, 8])])
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17)],
                              ir_version=8, producer_name="gen_torch.onnx_helper")
    onnx.checker.check_model(model, full_check=True)
    path = folder / "model.onnx"
    onnx.save(model, str(path))
    g = Graph(model)

    rng = np.random.default_rng(INPUT_SEED)
    inputs = {"valve": (4.0 * rng.standard_normal((2, 4, 8))).astype(np.float32)}
    sites = []
    c, k = g.region(["valve"], "hs_default")
    sites.append(site_entry(g, "s00", "hs_default", "hard_sigmoid",
                            {"alpha": f32(0.2), "beta": 0.5}, "valve", "hs_default", c, k))
    c, k = g.region(["not_hardswish"], "valve_level")
    sites.append(site_entry(g, "s01", "hardswish", "hard_swish", {}, "not_hardswish",
                            "valve_level", c, k))
    misses = [{"block": "mul_default", "not_kinds": ["hard_swish"],
               "reason": "x*HardSigmoid(x) with the ONNX default alpha 0.2, not 1/6",
               "inputs": ["valve"], "output": "not_hardswish",
               "nodes": ["hs_default", "mul_default"], "node_indices": [0, 1],
               "pattern": ["HardSigmoid", "Mul"]}]
    tensors = ["hs_default", "not_hardswish", "valve", "valve_level"]
    sess = session_with_outputs(path, tensors)
    vals = dict(zip([o.name for o in sess.get_outputs()], sess.run(None, inputs)))
    vals["valve"] = inputs["valve"]
    check_sites(sites, vals)
    check_near_misses(misses, vals)
    keys = {f"t{i:03d}": t for i, t in enumerate(tensors)}
    outs = {"valve_level": vals["valve_level"]}
    save_npz(folder / "inputs.npz", inputs)
    save_npz(folder / "outputs.npz", outs)
    save_npz(folder / "site_values.npz", {k: vals[t] for k, t in keys.items()})
    entry = {"id": folder.name, "scenario": "hard-sigmoid-default",
             "description": "valve monitor built with onnx.helper (torch only emits alpha=1/6)",
             "exporter": "onnx.helper", "dynamo": None, "opset_requested": 17,
             "dynamo_optimize": None, "do_constant_folding": None,
             "files": {"model": "model.onnx", "inputs": "inputs.npz", "outputs": "outputs.npz",
                       "site_values": "site_values.npz"},
             "site_value_keys": keys, "torch_vs_onnxruntime_max_abs": None,
             "sites": sites, "near_misses": misses, "info": info_figures(model)}
    entry.update(file_figures(path))
    return entry


def main():
    torch.use_deterministic_algorithms(True)
    torch.set_num_threads(1)
    if OUT.exists():
        shutil.rmtree(OUT)
    OUT.mkdir(parents=True)
    models = []
    for sid, desc, factory in SCENARIOS:
        for exporter, dynamo, opset, optimize in EXPORTS:
            e = build_model(sid, desc, factory, exporter, dynamo, opset, optimize)
            status = e.get("skipped") or f"{len(e['sites'])} sites, {len(e['near_misses'])} near misses"
            print(f"{e['id']}: {status}")
            models.append(e)
    models.append(hard_sigmoid_default())
    manifest = {
        "generator": GENERATOR,
        "versions": versions(torch, onnxscript, onnx_ir),
        "seeds": {"torch.manual_seed": TORCH_SEED, "input torch.Generator": INPUT_SEED,
                  "hard-sigmoid-default numpy default_rng": INPUT_SEED},
        "input_scale": "3 * standard normal (4 * for hard-sigmoid-default)",
        "exports": [{"exporter": e, "dynamo": d, "opset": o, "dynamo_optimize": opt}
                    for e, d, o, opt in EXPORTS],
        "site_check": {"against": "float64 formula on the site's onnxruntime input",
                       "rtol": REF_RTOL, "atol": REF_ATOL,
                       "onnxruntime": "site values with ORT_DISABLE_ALL; outputs.npz with "
                                      "default session options"},
        "kinds": sorted(FUSED_OP),
        "dynamo_capture": "torch.export.export(strict=False), as torch.onnx.export does for a "
                          "module, with the file paths in node stack traces made relative "
                          "(repository- or package-relative) before translation; the .onnx "
                          "files are then written by torch.onnx.export unchanged",
        "rules": {
            "site": "nodes computing `output` from `input`; constant-only nodes are listed "
                    "apart in constant_nodes",
            "nested": "activation ops inside a larger site (Sigmoid in SiLU, Softplus and Tanh "
                      "in Mish, HardSigmoid in HardSwish) belong to that site",
            "near_miss": "no reported site may have the near miss's output with a kind in "
                         "not_kinds",
        },
        "model_count": sum(1 for m in models if "skipped" not in m),
        "models": models,
    }
    write_json(OUT / "manifest.json", manifest)


if __name__ == "__main__":
    main()
