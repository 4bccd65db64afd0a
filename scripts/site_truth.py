"""Truth about activation sites in an exported ONNX graph: the kinds' published
formulas (float64), the graph walk that finds a site's nodes between two tensors,
the manifest entry of a site, and the checks of a site's onnxruntime values
against its formula.

Needs numpy, onnx and onnxruntime only; the torch generators share it.
"""

import math
import tempfile
from pathlib import Path

import numpy as np
import onnx
import onnxruntime as ort
from onnx import TensorProto, helper, numpy_helper

from onnx_info import node_attributes

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
    if kind == "softplus":  # torch keeps x above its threshold (None: no threshold)
        y = _softplus(p["beta"] * x) / p["beta"]
        return y if p["threshold"] is None else np.where(x * p["beta"] > p["threshold"], x, y)
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


def f32(v):
    """The float32 value the exported file holds for a Python scalar."""
    return float(np.float32(v))


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

    def folded_value(self, name):
        """Value of a constant, also through the Cast, CastLike and Identity nodes of an
        un-optimised export; else None."""
        v = self.const_value(name)
        i = self.producer.get(name)
        if v is None and i is not None and self.nodes[i].op_type in ("Cast", "CastLike",
                                                                      "Identity"):
            return self.folded_value(self.nodes[i].input[0])
        return v

    def trim_no_ops(self, x_in, y_out):
        """(x_in, y_out) without the exporter's no-op scale factors at the block's edges.

        torch's ELU family computes scale * elu(input_scale * x); the dynamo exporter without
        optimisation writes both factors, 1 by default, as Mul nodes. ONNX's Elu has neither,
        and a site holds only what its kind computes (a Mul by 1 or an Add of 0 is a
        computation the kind does not contain), so the site starts after and ends before them.
        """
        def no_op(i, x):
            n = self.nodes[i]
            if n.op_type not in ("Mul", "Div", "Add", "Sub") or len(n.input) != 2:
                return False
            if n.op_type in ("Div", "Sub") and n.input[0] != x:
                return False
            other = n.input[1] if n.input[0] == x else n.input[0]
            v = self.folded_value(other)
            neutral = 1.0 if n.op_type in ("Mul", "Div") else 0.0
            return v is not None and v.size == 1 and float(v.reshape(())) == neutral

        moved = True
        while moved:
            moved = False
            # CastLike's second input takes only x's type (the cast constants of the factors)
            readers = [j for j in self.consumers.get(x_in, [])
                       if not (self.nodes[j].op_type == "CastLike"
                               and self.nodes[j].input[0] != x_in)]
            if len(readers) == 1 and no_op(readers[0], x_in) and x_in != y_out:
                x_in, moved = self.nodes[readers[0]].output[0], True
            i = self.producer.get(y_out)
            if i is not None and y_out != x_in:
                n = self.nodes[i]
                dynamic = [t for t in n.input if t and self.folded_value(t) is None]
                if len(dynamic) == 1 and no_op(i, dynamic[0]):
                    y_out, moved = dynamic[0], True
        return x_in, y_out

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


def session_with_outputs(model_path, tensors, elem_types=None):
    """onnxruntime session on a temporary copy that lists `tensors` as graph outputs
    (graph optimisations off, so every listed value is computed as the graph says).
    `elem_types` maps a tensor to its TensorProto element type (default FLOAT)."""
    elem_types = elem_types or {}
    m = onnx.load(str(model_path))
    present = {o.name for o in m.graph.output}
    for t in tensors:
        if t not in present:
            elem = elem_types.get(t, TensorProto.FLOAT)
            m.graph.output.append(helper.make_tensor_value_info(t, elem, None))
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
