"""torch-side code shared by the torch fixture generators: the export call
(TorchScript or dynamo, with machine paths kept out of the file) and small
activation modules torch has no class for.
"""

import re
import sys
import warnings
from pathlib import Path

import torch
import torch.nn as nn

from onnx_info import ROOT

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


def export(net, example, names_in, names_out, path, dynamo, opset, optimize, dims=None):
    """Write `net` to `path` with one of torch's two ONNX exporters.

    `dims` makes axes dynamic: {tensor name: {axis: (dim name, min, max)}} for inputs
    and outputs. The dynamo exporter gets one named `torch.export.Dim` per dim name
    (`dynamic_shapes`, inputs only: torch derives the outputs), both for the capture
    and for the translation, which names the file's symbolic dims after them; the
    TorchScript exporter gets the names as `dynamic_axes`.
    """
    kwargs = dict(opset_version=opset, dynamo=dynamo, input_names=names_in,
                  output_names=names_out)
    model = net
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if dynamo:
            # The same capture torch.onnx.export(dynamo=True) makes from a module.
            shapes = dynamic_shapes(names_in, dims) if dims else None
            model = neutral_stack_traces(
                torch.export.export(net, example, dynamic_shapes=shapes, strict=False))
            kwargs.update(optimize=optimize, verbose=False, external_data=False)
            if shapes:  # given again, torch.onnx.export names the file's dims after them
                kwargs.update(dynamic_shapes=shapes)
        else:
            kwargs.update(do_constant_folding=True)
            if dims:
                kwargs.update(dynamic_axes={t: {a: d[0] for a, d in axes.items()}
                                            for t, axes in dims.items()})
        torch.onnx.export(model, example, str(path), **kwargs)


def dynamic_shapes(names_in, dims):
    """`dynamic_shapes` for torch.export: per positional input, its axes' named Dims
    (one Dim object per name, so equal names are one symbol)."""
    made = {}
    for axes in dims.values():
        for name, lo, hi in axes.values():
            made.setdefault(name, torch.export.Dim(name, min=lo, max=hi))
    return tuple({a: made[d[0]] for a, d in dims.get(n, {}).items()} or None
                 for n in names_in)


class ScaledSwish(nn.Module):
    """x * sigmoid(b * x) with b a Python scalar."""

    def __init__(self, b):
        super().__init__()
        self.b = b

    def forward(self, x):
        return x * torch.sigmoid(self.b * x)
