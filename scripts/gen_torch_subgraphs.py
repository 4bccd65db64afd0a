#!/usr/bin/env python3
"""Export small seeded torch blocks whose activations sit inside local functions or Loop bodies.

Not run in CI (needs torch: pip install -r scripts/requirements-torch.txt).
Its outputs are committed under tests/fixtures/torch-subgraphs/ so tests run offline.

Invented scenarios, each a real block with random seeded weights, exported by the TorchScript
exporter (dynamo=False) at opset 17 with dynamic dims (`dynamic_axes`):
  kiln-forecast   kiln-temperature forecaster: two residual MLP blocks, each exported as a
                  local function (`export_modules_as_functions`) holding a SiLU and a call to
                  a nested function, a swish whose beta (1.0 and 1.702) reaches it as an
                  attribute reference (`ref_attr_name`); a GELU in the main graph
  tide-gauge      tide-gauge smoother: a recurrent cell run once per time step by a
                  `torch.jit.script`ed loop (exported as a Loop whose trip count is the
                  input's sequence length, read from its shape), SiLU in the body, the
                  steps' states summed into a carried value

Per model folder: model.onnx (exactly as exported); per input set SET, inputs/SET/NAME.npy and
outputs/SET/NAME.npy (onnxruntime CPU, default session options). The script checks that
onnxruntime reproduces torch (max abs <= 1e-5) on every set.

Usage: python3 scripts/gen_torch_subgraphs.py
"""

import shutil
import warnings

import numpy as np
import onnx
import onnxruntime as ort
import torch
import torch.nn as nn
import torch.nn.functional as F

from onnx_info import ROOT, file_figures, versions, write_json

OUT = ROOT / "tests" / "fixtures" / "torch-subgraphs"
GENERATOR = "scripts/gen_torch_subgraphs.py"
TORCH_SEED = 1234
INPUT_SEED = 4321
OPSET = 17
# Input sets: (name, batch, seq).
SETS = [("b2-s6", 2, 6), ("b1-s3", 1, 3)]
TORCH_MATCH = 1e-5


class Swish(nn.Module):
    """x * sigmoid(beta * x), beta a Python float (a module attribute, so a function
    attribute of the export)."""

    def __init__(self, beta):
        super().__init__()
        self.beta = beta

    def forward(self, x):
        return x * torch.sigmoid(self.beta * x)


class KilnBlock(nn.Module):
    """Residual MLP: x + fc2(swish(silu(fc1(x)))) ."""

    def __init__(self, d, beta):
        super().__init__()
        self.fc1 = nn.Linear(d, 2 * d)
        self.act = nn.SiLU()
        self.gate = Swish(beta)
        self.fc2 = nn.Linear(2 * d, d)

    def forward(self, x):
        return x + self.fc2(self.gate(self.act(self.fc1(x))))


class KilnForecast(nn.Module):
    def __init__(self):
        super().__init__()
        self.b1 = KilnBlock(8, 1.0)
        self.b2 = KilnBlock(8, 1.702)
        self.head = nn.GELU()

    def forward(self, x):
        return self.head(self.b2(self.b1(x)))


class TideGauge(nn.Module):
    """h_t = silu(W (h_{t-1} + x_t) + b), summed over t; t runs over x's second axis."""

    def __init__(self, d):
        super().__init__()
        self.cell = nn.Linear(d, d)

    def forward(self, x):
        h = torch.zeros_like(x[:, 0])
        acc = torch.zeros_like(x[:, 0])
        for i in range(x.size(1)):
            h = F.silu(self.cell(h + x[:, i]))
            acc = acc + h
        return acc


def export(net, path, functions=None):
    kwargs = dict(opset_version=OPSET, dynamo=False, input_names=["x"], output_names=["y"],
                  do_constant_folding=True,
                  dynamic_axes={"x": {0: "batch", 1: "seq"}, "y": {0: "batch"}})
    if functions:
        kwargs["export_modules_as_functions"] = functions
        kwargs["dynamic_axes"]["y"][1] = "seq"
    example = (torch.zeros(2, 6, 8),)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        torch.onnx.export(net, example, str(path), **kwargs)


def build(model_id, description, make, functions=None):
    torch.manual_seed(TORCH_SEED)
    net = make().eval()
    folder = OUT / model_id
    folder.mkdir(parents=True)
    path = folder / "model.onnx"
    export(net, path, functions)
    session = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    rng = np.random.default_rng(INPUT_SEED)
    sets = []
    for name, batch, seq in SETS:
        x = rng.standard_normal((batch, seq, 8)).astype(np.float32)
        (y,) = session.run(None, {"x": x})
        with torch.no_grad():
            expected = net(torch.from_numpy(x)).numpy()
        gap = float(np.abs(y - expected).max())
        assert gap <= TORCH_MATCH, f"{model_id} {name}: onnxruntime vs torch {gap}"
        for kind, arr in (("inputs", x), ("outputs", y)):
            (folder / kind / name).mkdir(parents=True)
            np.save(folder / kind / name / ("x.npy" if kind == "inputs" else "y.npy"), arr)
        sets.append({"name": name, "dims": {"batch": batch, "seq": seq},
                     "onnxruntime_vs_torch_max_abs": gap})
    model = onnx.load(str(path))
    return {
        "id": model_id,
        "description": description,
        "exporter": "ts",
        "opset": OPSET,
        "local_functions": [f"{f.domain}.{f.name}" for f in model.functions],
        "loops": sum(1 for n in model.graph.node if n.op_type == "Loop"),
        "input_sets": sets,
        **file_figures(path),
    }


def main():
    torch.use_deterministic_algorithms(True)
    torch.set_num_threads(1)
    if OUT.exists():
        shutil.rmtree(OUT)
    OUT.mkdir(parents=True)
    models = [
        build("kiln-forecast-ts-op17",
              "two residual MLP blocks as local functions (SiLU inside, nested swish function "
              "with beta as an attribute reference), GELU in the main graph",
              KilnForecast, functions={KilnBlock, Swish}),
        build("tide-gauge-ts-op17",
              "a scripted loop over the sequence (Loop, trip count from the input's shape) "
              "with a SiLU in its body",
              lambda: torch.jit.script(TideGauge(8))),
    ]
    write_json(OUT / "manifest.json", {
        "generator": GENERATOR,
        "versions": versions(torch),
        "seeds": {"torch.manual_seed (weights, before each model is built)": TORCH_SEED,
                  "numpy default_rng (inputs, per model)": INPUT_SEED},
        "export": {"exporter": "TorchScript (dynamo=False)", "opset": OPSET,
                   "dynamic_axes": "x: batch, seq; y: batch (and seq for kiln-forecast)"},
        "files": {
            "inputs": "inputs/SET/x.npy; feed it with --input x=FILE",
            "outputs": "outputs/SET/y.npy: onnxruntime CPU, default session options"},
        "check": f"onnxruntime against torch on every set, max abs <= {TORCH_MATCH}",
        "models": models,
    })


if __name__ == "__main__":
    main()
