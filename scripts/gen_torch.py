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

import shutil

import numpy as np
import onnx
import onnx_ir
import onnxruntime as ort
import onnxscript
import torch
import torch.nn as nn
import torch.nn.functional as F
from onnx import TensorProto, helper

from onnx_info import ROOT, file_figures, info_figures, save_npz, versions, write_json
from site_truth import (FUSED_OP, REF_RTOL, REF_ATOL, Graph, check_near_misses, check_sites,
                        f32, session_with_outputs, site_entry)
from torch_common import ScaledSwish, export

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


# ---------------------------------------------------------------- modules
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


def resolve_params(spec_params, module):
    out = {}
    for k, v in spec_params.items():
        if isinstance(v, str) and v.startswith("param:"):
            t = getattr(module, v.split(":", 1)[1]).detach().numpy().astype(np.float32)
            out[k] = [float(x) for x in t.ravel()]
        else:
            out[k] = v
    return out


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
            x_in, y_out = g.trim_no_ops(starts[0], end)
            if (x_in, y_out) != (starts[0], end):
                compute, constant = g.region([x_in], y_out)
            sites.append(site_entry(g, f"s{len(sites):02d}", b.name, spec["kind"], params,
                                    x_in, y_out, compute, constant))
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
