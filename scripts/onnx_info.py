"""Shared helpers for the fixture generators: "info figures" of an ONNX model,
package versions, deterministic .npz writing and attribute-to-JSON conversion.

Every figure here is read with the `onnx` package so that the Rust side can be
checked against an outside reader of the same file.
"""

import hashlib
import io
import zipfile
from collections import Counter
from pathlib import Path

import numpy as np
import onnx
from onnx import AttributeProto, TensorProto

ROOT = Path(__file__).resolve().parent.parent


def rel(path):
    """Path relative to the repository root, with forward slashes."""
    return Path(path).resolve().relative_to(ROOT).as_posix()


def versions(*extra):
    """Exact versions of the packages a generator used."""
    import google.protobuf
    import onnxruntime

    out = {
        "onnx": onnx.__version__,
        "onnxruntime": onnxruntime.__version__,
        "numpy": np.__version__,
        "protobuf": google.protobuf.__version__,
    }
    for mod in extra:
        out[mod.__name__] = mod.__version__
    return out


def elem_type_name(elem_type):
    return TensorProto.DataType.Name(elem_type)


def value_info_json(vi):
    """name, elem_type (DataType name), shape (ints / dim_param strings / null)."""
    t = vi.type
    kind = t.WhichOneof("value")
    entry = {"name": vi.name, "type": kind, "elem_type": None, "shape": None}
    if kind == "tensor_type":
        entry["elem_type"] = elem_type_name(t.tensor_type.elem_type)
        if t.tensor_type.HasField("shape"):
            dims = []
            for d in t.tensor_type.shape.dim:
                which = d.WhichOneof("value")
                if which == "dim_value":
                    dims.append(d.dim_value)
                elif which == "dim_param":
                    dims.append(d.dim_param)
                else:
                    dims.append(None)
            entry["shape"] = dims
    return entry


def op_key(node):
    """op_type, prefixed by its domain when it is not the default one."""
    if node.domain in ("", "ai.onnx"):
        return node.op_type
    return f"{node.domain}:{node.op_type}"


def count_subgraphs(graph):
    """Number of graph-valued attributes below `graph`, nested ones included."""
    total = 0
    for node in graph.node:
        for attr in node.attribute:
            subs = []
            if attr.type == AttributeProto.GRAPH:
                subs = [attr.g]
            elif attr.type == AttributeProto.GRAPHS:
                subs = list(attr.graphs)
            for sub in subs:
                total += 1 + count_subgraphs(sub)
    return total


def info_figures(model):
    g = model.graph
    return {
        "ir_version": model.ir_version,
        "producer_name": model.producer_name,
        "producer_version": model.producer_version,
        "opset_import": opset_imports(model),
        "node_count": len(g.node),
        "op_counts": dict(sorted(Counter(op_key(n) for n in g.node).items())),
        "inputs": [value_info_json(v) for v in g.input],
        "outputs": [value_info_json(v) for v in g.output],
        "initializer_count": len(g.initializer),
        "initializer_raw_bytes": sum(len(t.raw_data) for t in g.initializer),
        "local_function_count": len(model.functions),
        "subgraph_count": count_subgraphs(g),
        "unnamed_node_count": sum(1 for n in g.node if not n.name),
        "duplicate_node_names": duplicate_node_names(g),
    }


def duplicate_node_names(graph):
    """Node names used more than once, counting an unnamed node's first output
    as its name (runtimes that name such nodes after their output clash too)."""
    names = [n.name or (n.output[0] if n.output else "") for n in graph.node]
    counts = Counter(n for n in names if n)
    return sorted(n for n, c in counts.items() if c > 1)


def opset_imports(model):
    return {o.domain: o.version for o in model.opset_import}


def file_figures(path):
    """Size, sha256 and whether onnx's load+serialize reproduces the bytes.

    External data is left where it is (load_external_data=False): loading it
    would move the bytes into raw_data and the comparison would say nothing.
    """
    data = Path(path).read_bytes()
    reloaded = onnx.load(str(path), load_external_data=False).SerializeToString()
    return {
        "file_bytes": len(data),
        "sha256": hashlib.sha256(data).hexdigest(),
        "roundtrip_identical": reloaded == data,
    }


def attribute_json(attr):
    """Plain JSON for scalar/list attributes; tensors and graphs are summarised."""
    t = attr.type
    if t == AttributeProto.FLOAT:
        return float(attr.f)
    if t == AttributeProto.INT:
        return int(attr.i)
    if t == AttributeProto.STRING:
        return attr.s.decode("utf-8")
    if t == AttributeProto.FLOATS:
        return [float(v) for v in attr.floats]
    if t == AttributeProto.INTS:
        return [int(v) for v in attr.ints]
    if t == AttributeProto.STRINGS:
        return [s.decode("utf-8") for s in attr.strings]
    if t == AttributeProto.TENSOR:
        arr = onnx.numpy_helper.to_array(attr.t)
        return {"tensor": {"elem_type": elem_type_name(attr.t.data_type),
                           "dims": list(attr.t.dims),
                           "values": arr.astype(np.float64).ravel().tolist()
                           if arr.size <= 16 else None}}
    return {"unsupported_attribute_type": AttributeProto.AttributeType.Name(t)}


def node_attributes(node):
    return {a.name: attribute_json(a) for a in node.attribute}


def save_npz(path, arrays):
    """np.savez equivalent with fixed zip timestamps, so reruns are byte-identical.

    Entries are stored uncompressed and named `<key>.npy`, which any npz reader
    (numpy.load, ndarray-npy's NpzReader) accepts.
    """
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_STORED) as zf:
        for key, arr in arrays.items():
            npy = io.BytesIO()
            np.lib.format.write_array(npy, np.ascontiguousarray(arr), allow_pickle=False)
            info = zipfile.ZipInfo(f"{key}.npy", date_time=(1980, 1, 1, 0, 0, 0))
            info.external_attr = 0o644 << 16
            zf.writestr(info, npy.getvalue())
    Path(path).write_bytes(buf.getvalue())


def write_json(path, doc):
    import json

    Path(path).write_text(json.dumps(doc, indent=1, allow_nan=False) + "\n")
