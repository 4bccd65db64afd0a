"""Checks real JSON outputs of every actswap command against the committed JSON Schemas.

Each command that prints JSON (scan, swap, audit, drift, batch, info, catalog) runs on every
bundled sample model (sample-models/) and on a torch export (tests/fixtures/torch, dynamo
exporter with dynamic shapes); its output must validate against schemas/NAME.schema.json with
the jsonschema package (Draft 2020-12). The built-in target profiles (profiles/*.toml, read
with Python's tomllib) and the example of src/plan/profile.rs's doc must validate against
schemas/profile.schema.json. A document stripped of its "schema_version" must be refused, so
the check is known to bite.

Pinned versions: scripts/requirements-ci.txt. Needs the built binary:
    cargo build --bin actswap
    python3 scripts/check_schemas.py [TARGET_DIR]
"""

import copy
import glob
import json
import os
import subprocess
import sys
import tempfile
import tomllib

import jsonschema

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
TARGET = sys.argv[1] if len(sys.argv) > 1 else os.environ.get("CARGO_TARGET_DIR", os.path.join(ROOT, "target"))
ACTSWAP = os.path.join(TARGET, "debug", "actswap")
TORCH_FIXTURE = "tests/fixtures/torch/leaf-spot-dynamo-op18/model.onnx"
# Few samples and runs: the check is about the documents' shape, not their figures.
SMALL = ["--samples", "2", "--runs", "2", "--warmup", "1"]


def validator(name):
    with open(os.path.join(ROOT, "schemas", f"{name}.schema.json")) as f:
        schema = json.load(f)
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def actswap(*args):
    """Runs actswap; a document is printed with exit code 0 or 1 (2 is an error)."""
    run = subprocess.run([ACTSWAP, *args], capture_output=True, text=True, cwd=ROOT)
    if run.returncode not in (0, 1):
        raise SystemExit(f"actswap {' '.join(args)}: exit code {run.returncode}: {run.stderr.strip()}")
    return json.loads(run.stdout)


def symbolic_dims(info):
    """The symbolic dims of the main graph's inputs."""
    return {d for v in info["graph"]["inputs"] for d in (v["shape"] or []) if isinstance(d, str)}


def dim_flags(dims):
    """`--dim NAME=1` for every dim."""
    return [a for d in sorted(dims) for a in ("--dim", f"{d}=1")]


def documented_profile():
    """The example profile of src/plan/profile.rs's module doc (op tables, another domain)."""
    with open(os.path.join(ROOT, "src/plan/profile.rs")) as f:
        text = "".join(line[4:] if line.startswith("//! ") else "\n" for line in f if line.startswith("//!"))
    return text[text.index("```toml") + len("```toml"):text.index("```", text.index("```toml") + 7)]


def main():
    validators = {n: validator(n) for n in ["scan", "swap", "audit", "drift", "batch", "info", "catalog", "profile"]}
    checked = {n: 0 for n in validators}
    failures = []

    def check(name, doc, what):
        errors = sorted(validators[name].iter_errors(doc), key=lambda e: list(e.absolute_path))
        for e in errors[:3]:
            failures.append(f"{what}: {'/'.join(map(str, e.absolute_path))}: {e.message[:300]}")
        checked[name] += 1

    models = sorted(glob.glob("sample-models/*.onnx", root_dir=ROOT)) + [TORCH_FIXTURE]
    with tempfile.TemporaryDirectory() as tmp:
        for i, model in enumerate(models):
            info = actswap("info", model, "--json")
            check("info", info, f"info {model}")
            dims = dim_flags(symbolic_dims(info))
            check("scan", actswap("scan", model, "--json"), f"scan {model}")
            check("swap", actswap("swap", model, "--target", "piecewise-linear", "--dry-run", "--json"),
                  f"swap --dry-run {model}")
            primitive = os.path.join(tmp, f"{i}.primitive.onnx")
            check("swap", actswap("swap", model, "--to", "*=primitive", "-o", primitive, "--json"),
                  f"swap -o {model}")
            check("drift", actswap("drift", model, primitive, *dims, *SMALL, "--json"), f"drift {model}")
            audit = actswap("audit", model, "--target", "piecewise-linear", *dims, *SMALL,
                            "-o", os.path.join(tmp, f"{i}.audited.onnx"), "--write-failing",
                            "--report", os.path.join(tmp, f"{i}.html"), "--json")
            check("audit", audit, f"audit {model}")
            check("audit", actswap("audit", model, "--to", "silu=hard_swish", *dims, "--no-latency", "--json"),
                  f"audit --to {model}")
        # A rewritten site no sample reaches (door-chime's then-branch SiLU, taken when
        # mean(mfcc) > 0): verdict "unmeasured", in the audit and the batch documents.
        unreached = ["--to", "silu=hard_swish", "--dim", "batch=1", "--dist", "uniform",
                     "--range=-2,-1", "--no-latency", "--json"]
        door = "sample-models/door-chime-keywords.onnx"
        doc = actswap("audit", door, *unreached)
        if doc["verdict"] != "unmeasured":
            failures.append(f"audit of an unreached branch site: verdict {doc['verdict']}")
        check("audit", doc, "audit of an unreached branch site")
        check("batch", actswap("batch", door, "-o", os.path.join(tmp, "unreached"), *unreached),
              "batch of an unreached branch site")
        sample_dims = set().union(*(symbolic_dims(actswap("info", m, "--json")) for m in models[:-1]))
        check("batch", actswap("batch", "sample-models", "-o", os.path.join(tmp, "converted"),
                               "--target", "piecewise-linear", *dim_flags(sample_dims), *SMALL, "--json"),
              "batch sample-models")

    check("catalog", actswap("catalog", "--json"), "catalog")
    check("catalog", actswap("catalog", "swish", "--json"), "catalog swish")
    for path in sorted(glob.glob("profiles/*.toml", root_dir=ROOT)):
        with open(os.path.join(ROOT, path), "rb") as f:
            check("profile", tomllib.load(f), path)
    check("profile", tomllib.loads(documented_profile()), "the profile in src/plan/profile.rs's doc")

    stripped = copy.deepcopy(audit)
    del stripped["schema_version"]
    if validators["audit"].is_valid(stripped):
        failures.append("an audit document without schema_version was accepted")

    print("validated: " + ", ".join(f"{n} {c}" for n, c in checked.items()))
    if failures:
        print("\n".join(failures))
        raise SystemExit(f"{len(failures)} schema violations")


if __name__ == "__main__":
    main()
