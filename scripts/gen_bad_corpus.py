#!/usr/bin/env python3
"""Write the corpus of malformed models and one good model with external data.

tests/corpus/bad/<file>          one defect per file, built with onnx.helper and
                                 written without the checker (the checker would
                                 refuse most of them)
tests/corpus/bad/manifest.json   per file: the defect and a short substring the
                                 error message is expected to contain
tests/corpus/good-external/      model.onnx + weights.bin (every initializer
                                 external, via onnx.external_data_helper), a
                                 seeded input and the onnxruntime output (.npy)
tests/corpus/refused/            models actswap refuses before doing any work
                                 (names defined twice, data that disagrees with
                                 its shape, external data that is no file, deep
                                 nesting, unsorted nodes, control characters);
                                 manifest.json gives per file the command, the
                                 expected error and the onnx checker's and
                                 onnxruntime's verdicts
tests/corpus/unknown-fields/     a model whose messages carry field numbers the
                                 current schema lacks (as a newer IR would write
                                 them), kept by protobuf's own parser; the
                                 manifest lists each one's bytes

The models are set in an invented scenario: a thermal camera watching a bakery
oven line. Usage: python3 scripts/gen_bad_corpus.py
"""

import re
import shutil

import numpy as np
import onnx
import onnxruntime as ort
from onnx import TensorProto, helper, numpy_helper
from onnx.external_data_helper import convert_model_to_external_data

from onnx_info import ROOT, file_figures, info_figures, versions, write_json

BAD = ROOT / "tests" / "corpus" / "bad"
GOOD = ROOT / "tests" / "corpus" / "good-external"
REFUSED = ROOT / "tests" / "corpus" / "refused"
UNKNOWN = ROOT / "tests" / "corpus" / "unknown-fields"
GENERATOR = "scripts/gen_bad_corpus.py"
SEED = 20261201
OPSET = 18
IR_VERSION = 10


def make_model(nodes, inputs, outputs, initializers=(), name="oven_camera"):
    graph = helper.make_graph(nodes, name, inputs, outputs, initializer=list(initializers))
    return helper.make_model(graph, opset_imports=[helper.make_opsetid("", OPSET)],
                             ir_version=IR_VERSION, producer_name="gen_bad_corpus")


def fvi(name, shape):
    return helper.make_tensor_value_info(name, TensorProto.FLOAT, shape)


def swish_model(rng):
    """A valid Conv + x*sigmoid(x) model; the base that several defects start from."""
    w = rng.standard_normal((4, 3, 3, 3)).astype(np.float32)
    b = rng.standard_normal(4).astype(np.float32)
    nodes = [
        helper.make_node("Conv", ["pixels", "conv.w", "conv.b"], ["conv.out"],
                         name="conv", pads=[1, 1, 1, 1]),
        helper.make_node("Sigmoid", ["conv.out"], ["gate"], name="swish.sigmoid"),
        helper.make_node("Mul", ["conv.out", "gate"], ["heat"], name="swish.mul"),
    ]
    inits = [numpy_helper.from_array(w, "conv.w"), numpy_helper.from_array(b, "conv.b")]
    return make_model(nodes, [fvi("pixels", [1, 3, 8, 8])], [fvi("heat", [1, 4, 8, 8])], inits)


def empty_tensor(name, dims):
    """A FLOAT TensorProto with dims and no data (make_tensor would refuse it)."""
    t = TensorProto(name=name, data_type=TensorProto.FLOAT)
    t.dims.extend(dims)
    return t


def external_initializer(name, dims, location, length):
    """A FLOAT initializer whose bytes are said to live in `location`."""
    t = empty_tensor(name, dims)
    t.data_location = TensorProto.EXTERNAL
    for key, value in (("location", location), ("offset", "0"), ("length", str(length))):
        entry = t.external_data.add()
        entry.key, entry.value = key, value
    return t


def scale_model(initializer):
    """y = x * scale, with `scale` the given initializer of shape [2, 3]."""
    nodes = [helper.make_node("Mul", ["reading", initializer.name], ["scaled"], name="scale"),
             helper.make_node("Sigmoid", ["scaled"], ["level"], name="level.sigmoid")]
    return make_model(nodes, [fvi("reading", [2, 3])], [fvi("level", [2, 3])], [initializer])


def python_decodes(data):
    try:
        onnx.load_from_string(data)
        return True
    except Exception:
        return False


def checker_verdict(data):
    """What onnx.checker says (full check, as a second opinion on each defect)."""
    try:
        onnx.checker.check_model(onnx.load_from_string(data), full_check=True)
        return "accepted"
    except Exception as e:
        return "refused: " + str(e).strip().splitlines()[0][:160]


def onnxruntime_verdict(path):
    """Whether onnxruntime can open the file (as a second opinion on each defect)."""
    try:
        ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
        return "accepted"
    except Exception as e:
        msg = str(e).strip().splitlines()[0].replace(str(ROOT) + "/", "")
        msg = re.sub(r"(/[\w.+\-]+)+/(?=[\w.+\-]+:\d+)", "", msg)  # source-file dirs
        return "refused: " + msg[:200]


def build_bad(rng):
    """(file name, bytes, defect, expected error substring, note)."""
    cases = []
    cases.append(("empty.onnx", b"",
                  "empty file (0 bytes)", "not an ONNX model",
                  "protobuf decodes 0 bytes as an empty ModelProto; it has no graph"))
    cases.append(("random-bytes.onnx", rng.bytes(512),
                  f"512 random bytes (numpy default_rng seed {SEED})", "not an ONNX model",
                  None))
    base = swish_model(rng)
    full = base.SerializeToString()
    raw = base.graph.initializer[0].raw_data
    start = full.find(raw)
    assert start < len(full) // 2 < start + len(raw), "the cut must fall inside raw_data"
    cases.append(("truncated.onnx", full[: len(full) // 2],
                  f"valid model cut to its first {len(full) // 2} of {len(full)} bytes",
                  "not an ONNX model", "the cut falls inside an initializer's raw_data"))
    text = (b'ir_version: 10\nopset_import { domain: "" version: 18 }\n'
            b'graph {\n  name: "oven_camera"\n'
            b'  node { op_type: "Sigmoid" input: "reading" output: "level" }\n}\n')
    cases.append(("text-format.onnx", text,
                  "a model written in protobuf text format instead of binary",
                  "not an ONNX model", None))

    cycle = make_model(
        [helper.make_node("Add", ["reading", "loop.b"], ["loop.a"], name="add_a"),
         helper.make_node("Add", ["loop.a", "reading"], ["loop.b"], name="add_b"),
         helper.make_node("Sigmoid", ["loop.a"], ["level"], name="level.sigmoid")],
        [fvi("reading", [2, 3])], [fvi("level", [2, 3])])
    cases.append(("cycle.onnx", cycle.SerializeToString(),
                  "two Add nodes feed each other (add_a reads loop.b, add_b reads loop.a)",
                  "cycle", None))

    undefined = make_model(
        [helper.make_node("Mul", ["reading", "ghost.scale"], ["scaled"], name="scale"),
         helper.make_node("Sigmoid", ["scaled"], ["level"], name="level.sigmoid")],
        [fvi("reading", [2, 3])], [fvi("level", [2, 3])])
    cases.append(("undefined-tensor.onnx", undefined.SerializeToString(),
                  "node 'scale' reads 'ghost.scale', which no input, initializer or node defines",
                  "undefined tensor", None))

    missing = scale_model(external_initializer("scale", [2, 3], "missing-weights.bin", 24))
    cases.append(("external-missing.onnx", missing.SerializeToString(),
                  "initializer 'scale' is external in 'missing-weights.bin', which does not exist",
                  "external data", None))
    escape = scale_model(external_initializer("scale", [2, 3], "../../x", 24))
    cases.append(("external-escapes.onnx", escape.SerializeToString(),
                  "external data location '../../x' leaves the model directory",
                  "escapes", None))
    absolute = scale_model(external_initializer("scale", [2, 3], "/nonexistent/weights.bin", 24))
    cases.append(("external-absolute.onnx", absolute.SerializeToString(),
                  "external data location is the absolute path '/nonexistent/weights.bin'",
                  "absolute", None))

    short = empty_tensor("scale", [2, 3])
    short.raw_data = np.arange(2, dtype=np.float32).tobytes()
    cases.append(("raw-data-length.onnx", scale_model(short).SerializeToString(),
                  "FLOAT [2,3] initializer needs 24 bytes of raw_data but has 8",
                  "raw_data length", None))

    huge = empty_tensor("scale", [1 << 40, 1 << 40])
    cases.append(("absurd-shape.onnx", scale_model(huge).SerializeToString(),
                  "initializer dims [2^40, 2^40] (2^80 elements, overflows 64 bits) and no data",
                  "too large",
                  "must be refused before any allocation; a size check may also report the "
                  "missing data"))
    return cases


def write_bad(rng):
    if BAD.exists():
        shutil.rmtree(BAD)
    BAD.mkdir(parents=True)
    entries = []
    for name, data, defect, expect, note in build_bad(rng):
        (BAD / name).write_bytes(data)
        decodes = python_decodes(data)
        entries.append({
            "file": name,
            "bytes": len(data),
            "defect": defect,
            "expect_error": expect,
            "expect_exit_code": 2,
            "onnx_python_decodes": decodes,
            "onnx_checker": checker_verdict(data) if decodes else "not decoded",
            "onnxruntime": onnxruntime_verdict(BAD / name),
            "note": note,
        })
    must_not_decode = {"random-bytes.onnx", "truncated.onnx", "text-format.onnx"}
    for e in entries:
        if e["file"] in must_not_decode:
            assert not e["onnx_python_decodes"], e["file"]
    write_json(BAD / "manifest.json", {
        "generator": GENERATOR,
        "versions": versions(),
        "seed": {"numpy_default_rng": SEED},
        "exit_codes": {"2": "error (bad input)"},
        "files": entries,
    })
    return len(entries)


def write_good(rng):
    if GOOD.exists():
        shutil.rmtree(GOOD)
    GOOD.mkdir(parents=True)
    model = swish_model(rng)
    w2 = rng.standard_normal((2, 4, 1, 1)).astype(np.float32)
    model.graph.initializer.append(numpy_helper.from_array(w2, "head.w"))
    model.graph.node.append(helper.make_node("Conv", ["heat", "head.w"], ["head.out"],
                                             name="head"))
    model.graph.node.append(helper.make_node("Sigmoid", ["head.out"], ["hot_spot"],
                                             name="head.sigmoid"))
    model.graph.output[0].CopyFrom(fvi("hot_spot", [1, 2, 8, 8]))
    onnx.checker.check_model(model)
    convert_model_to_external_data(model, all_tensors_to_one_file=True,
                                   location="weights.bin", size_threshold=0)
    path = GOOD / "model.onnx"
    onnx.save(model, str(path))

    x = rng.standard_normal((1, 3, 8, 8)).astype(np.float32)
    sess = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    names = [o.name for o in sess.get_outputs()]
    y = sess.run(names, {"pixels": x})
    np.save(GOOD / "input_pixels.npy", x)
    np.save(GOOD / "output_hot_spot.npy", y[0])

    loaded = onnx.load(str(path), load_external_data=False)
    externals = []
    for t in loaded.graph.initializer:
        meta = {e.key: e.value for e in t.external_data}
        externals.append({"name": t.name, "dims": list(t.dims),
                          "elem_type": TensorProto.DataType.Name(t.data_type),
                          "location": meta.get("location"),
                          "offset": int(meta.get("offset", 0)),
                          "length": int(meta["length"])})
    entry = {
        "generator": GENERATOR,
        "versions": versions(),
        "seed": {"numpy_default_rng": SEED},
        "model": "model.onnx",
        "external_files": ["weights.bin"],
        "weights_bin_bytes": (GOOD / "weights.bin").stat().st_size,
        "external_initializers": externals,
        "inputs": {"pixels": "input_pixels.npy"},
        "outputs": {"hot_spot": "output_hot_spot.npy"},
        "expected_from": "onnxruntime CPUExecutionProvider",
        "activation_sites": [
            {"kind": "silu", "form": "decomposed", "nodes": ["swish.sigmoid", "swish.mul"],
             "input": "conv.out", "output": "heat"},
            {"kind": "sigmoid", "form": "fused", "nodes": ["head.sigmoid"],
             "input": "head.out", "output": "hot_spot"},
        ],
        "info": info_figures(loaded),
    }
    entry.update(file_figures(path))
    write_json(GOOD / "manifest.json", entry)


def silu_model(nodes=None):
    """y = x * sigmoid(x) on a [2, 3] reading; `nodes` replaces the two nodes."""
    nodes = nodes or [helper.make_node("Sigmoid", ["reading"], ["gate"], name="silu.sigmoid"),
                      helper.make_node("Mul", ["reading", "gate"], ["level"], name="silu.mul")]
    return make_model(nodes, [fvi("reading", [2, 3])], [fvi("level", [2, 3])])


def varint(n):
    out = bytearray()
    while n >= 0x80:
        out.append(n & 0x7F | 0x80)
        n >>= 7
    out.append(n)
    return bytes(out)


def field(number, payload):
    """A length-delimited protobuf field."""
    return varint(number << 3 | 2) + varint(len(payload)) + payload


def nested_if(levels):
    """`levels` If nodes, each the then-branch of the one before: deeper than protobuf decoding
    allows. Written at the wire level, since protobuf's own Python classes refuse to build it."""
    level = fvi("level", [2, 3]).SerializeToString()
    graph = helper.make_graph([helper.make_node("Identity", ["reading"], ["level"], name="leaf")],
                              "leaf", [], [fvi("level", [2, 3])]).SerializeToString()
    for i in range(levels):
        attr = onnx.AttributeProto(name="then_branch", type=onnx.AttributeProto.GRAPH)
        node = helper.make_node("If", ["open"], ["level"], name=f"gate{i}")
        node_bytes = node.SerializeToString() + field(5, attr.SerializeToString() + field(6, graph))
        graph = field(1, node_bytes) + field(2, f"branch{i}".encode()) + field(12, level)
    shell = make_model([], [fvi("reading", [2, 3]),
                            helper.make_tensor_value_info("open", TensorProto.BOOL, [])],
                       [fvi("level", [2, 3])])
    shell.ClearField("graph")
    return shell.SerializeToString() + field(7, graph)


def build_refused():
    """(file, bytes, defect, command, expected error substring, extra files {name: bytes})."""
    cases = []
    for name, location, what in (("external-empty-location.onnx", "", "an empty location"),
                                 ("external-dot-location.onnx", ".", "location '.' (the folder)")):
        m = scale_model(external_initializer("scale", [2, 3], location, 24))
        cases.append((name, m.SerializeToString(), f"initializer 'scale' has {what}",
                      "info", "names no file", {}))
    short = np.arange(2, dtype=np.float32).tobytes()
    m = scale_model(external_initializer("scale", [2, 3], "external-short.bin", 8))
    cases.append(("external-short.onnx", m.SerializeToString(),
                  "FLOAT [2,3] initializer (24 bytes) whose external data is 8 bytes long",
                  "info", "external data holds 8 bytes but its shape [2, 3] needs 24",
                  {"external-short.bin": short}))
    t = external_initializer("scale", [2, 3], "external-short.bin", 0)
    del t.external_data[2]  # no length: the data runs to the end of the 8-byte file
    cases.append(("external-short-to-end.onnx", scale_model(t).SerializeToString(),
                  "FLOAT [2,3] initializer with no external length; the file holds 8 bytes",
                  "info", "external data holds 8 bytes", {}))
    t = empty_tensor("scale", [1 << 20, 1 << 20])
    t.float_data.append(1.0)
    cases.append(("typed-count.onnx", scale_model(t).SerializeToString(),
                  "FLOAT [2^20, 2^20] initializer (2^40 elements) with one float_data value",
                  "info", "float_data holds 1 values but its shape", {}))
    t = empty_tensor("scale", [2, 3])
    t.int64_data.extend(range(6))
    cases.append(("typed-wrong-field.onnx", scale_model(t).SerializeToString(),
                  "FLOAT [2,3] initializer whose six values are in int64_data",
                  "info", "FLOAT values belong in float_data", {}))
    scale = numpy_helper.from_array(np.ones((2, 3), np.float32), "scale")
    nodes = [helper.make_node("Mul", ["reading", "scale"], ["scaled"], name="scale"),
             helper.make_node("Sigmoid", ["scaled"], ["reading"], name="overwrite"),
             helper.make_node("Relu", ["scaled"], ["level"], name="level.relu")]
    m = make_model(nodes, [fvi("reading", [2, 3])], [fvi("level", [2, 3])], [scale])
    cases.append(("output-is-input.onnx", m.SerializeToString(),
                  "node 'overwrite' writes 'reading', the graph input",
                  "info", "already a graph input", {}))
    nodes[1] = helper.make_node("Sigmoid", ["scaled"], ["scale"], name="overwrite")
    m = make_model(nodes, [fvi("reading", [2, 3])], [fvi("level", [2, 3])], [scale])
    cases.append(("output-is-initializer.onnx", m.SerializeToString(),
                  "node 'overwrite' writes 'scale', an initializer",
                  "info", "already an initializer", {}))
    twice = numpy_helper.from_array(np.full((2, 3), 2, np.float32), "scale")
    m = scale_model(scale)
    m.graph.initializer.append(twice)
    cases.append(("duplicate-initializer.onnx", m.SerializeToString(),
                  "two initializers named 'scale' (ones, then twos)",
                  "info", "initializer 'scale' is defined twice", {}))
    cases.append(("deep-nesting.onnx", nested_if(40),
                  "40 If nodes, each inside the then-branch of the last: 120+ nested messages",
                  "info", "deeper than the 100 levels", {}))
    nodes = [helper.make_node("Mul", ["reading", "gate"], ["level"], name="silu.mul"),
             helper.make_node("Sigmoid", ["reading"], ["gate"], name="silu.sigmoid")]
    cases.append(("unsorted-nodes.onnx", silu_model(nodes).SerializeToString(),
                  "x*sigmoid(x) with the Mul stored before the Sigmoid that feeds it",
                  "swap --to silu=hard_swish", "not in topological order", {}))
    nodes = [helper.make_node("Sigmoid", ["reading"], ["gate"], name="silu.sigmoid"),
             helper.make_node("Mul", ["reading", "ghost\x1b[2J\x07\r"], ["level"],
                              name="bell\x07node")]
    cases.append(("control-characters.onnx", silu_model(nodes).SerializeToString(),
                  "node 'bell<BEL>node' reads an undefined tensor whose name holds ESC [2J, "
                  "BEL and CR", "info", "ghost\\u{1b}[2J\\u{7}\\r", {}))
    return cases


# Files whose claimed shape onnxruntime would try to allocate.
HUGE = {"typed-count.onnx"}


def write_refused():
    if REFUSED.exists():
        shutil.rmtree(REFUSED)
    REFUSED.mkdir(parents=True)
    entries = []
    for name, data, defect, command, expect, extra in build_refused():
        (REFUSED / name).write_bytes(data)
        for extra_name, extra_bytes in extra.items():
            (REFUSED / extra_name).write_bytes(extra_bytes)
        decodes = python_decodes(data)
        entries.append({
            "file": name,
            "bytes": len(data),
            "defect": defect,
            "command": command,  # the subcommand, then options beside the model (and -o)
            "expect_error": expect,
            "expect_exit_code": 2,
            "onnx_python_decodes": decodes,
            "onnx_checker": checker_verdict(data) if decodes else "not decoded",
            "onnxruntime": ("not run: it would allocate 2^40 elements"
                            if name in HUGE else onnxruntime_verdict(REFUSED / name)),
        })
    write_json(REFUSED / "manifest.json", {
        "generator": GENERATOR,
        "versions": versions(),
        "exit_codes": {"2": "error (bad input)"},
        "files": entries,
    })
    return len(entries)


def with_unknown(message, number, payload):
    """Re-parses `message` with a length-delimited field `number` the schema lacks appended;
    protobuf keeps it as an unknown field and writes it back. Returns the field's bytes."""
    extra = bytes([(number << 3 | 2) & 0x7F | 0x80, number >> 4, len(payload)]) + payload
    assert number >= 16 and number < 2048 and len(payload) < 128
    message.ParseFromString(message.SerializeToString() + extra)
    return extra


def write_unknown_fields():
    """A hard-swish model whose model, graph and nodes carry unknown fields 90..99."""
    if UNKNOWN.exists():
        shutil.rmtree(UNKNOWN)
    UNKNOWN.mkdir(parents=True)
    nodes = [helper.make_node("Relu", ["reading"], ["warm"], name="warm.relu"),
             helper.make_node("HardSwish", ["warm"], ["glow"], name="glow.hard_swish"),
             helper.make_node("Sigmoid", ["glow"], ["level"], name="level.sigmoid")]
    model = make_model(nodes, [fvi("reading", [2, 3])], [fvi("level", [2, 3])])
    fields = []
    # Innermost first: re-parsing a message keeps the unknown fields of the ones inside it.
    for target, where, number, payload in (
            (model.graph.node[0], "node warm.relu (kept)", 97, b"calibrated"),
            (model.graph.node[1], "node glow.hard_swish (rewritten)", 96, b"fused by exporter"),
            (model.graph.node[2], "node level.sigmoid (kept)", 95, b"bounded"),
            (model.graph, "graph", 98, b"oven line 4"),
            (model, "model", 99, b"kiln schedule v2")):
        extra = with_unknown(target, number, payload)
        fields.append({"where": where, "number": number, "bytes_hex": extra.hex()})
    data = model.SerializeToString()
    for f in fields:
        assert bytes.fromhex(f["bytes_hex"]) in data, f
    (UNKNOWN / "model.onnx").write_bytes(data)
    kept = [model.graph.node[i].SerializeToString().hex() for i in (0, 2)]
    write_json(UNKNOWN / "manifest.json", {
        "generator": GENERATOR,
        "versions": versions(),
        "model": "model.onnx",
        "unknown_fields": fields,
        "kept_nodes_hex": kept,
        "rewrite": "--to hard_swish=primitive replaces node glow.hard_swish; every other "
                   "message is kept",
        "onnx_checker": checker_verdict(data),
    })


def main():
    rng = np.random.default_rng(SEED)
    n = write_bad(rng)
    write_good(rng)
    r = write_refused()
    write_unknown_fields()
    print(f"{n} bad files, 1 good model with external data, {r} refused models, "
          "1 model with unknown fields")


if __name__ == "__main__":
    main()
