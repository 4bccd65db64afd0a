#!/usr/bin/env python3
"""Dump the ONNX protobuf schema (as shipped by the `onnx` package) to JSON.

The output lists every message (nested ones under their full name, e.g.
`onnx.TensorProto.Segment`) with every field, and every enum with its values.
A Rust test compares it with the descriptors of the crate's own onnx.proto so
that a wrong or missing field number fails a test instead of dropping data.

Usage: python3 scripts/dump_onnx_schema.py [OUT]   (default tests/fixtures/onnx-schema.json)
"""

import json
import sys
from pathlib import Path

import google.protobuf
import onnx
from google.protobuf import descriptor_pb2

ROOT = Path(__file__).resolve().parent.parent
DEFAULT_OUT = ROOT / "tests" / "fixtures" / "onnx-schema.json"

# google/protobuf/descriptor.proto FieldDescriptorProto.Type numbering.
TYPE_NAMES = {
    1: "double", 2: "float", 3: "int64", 4: "uint64", 5: "int32",
    6: "fixed64", 7: "fixed32", 8: "bool", 9: "string", 10: "group",
    11: "message", 12: "bytes", 13: "uint32", 14: "enum", 15: "sfixed32",
    16: "sfixed64", 17: "sint32", 18: "sint64",
}


def label_of(field):
    if field.is_repeated:
        return "repeated"
    if field.is_required:
        return "required"
    return "optional"


def dump_enum(enum):
    return {
        "full_name": enum.full_name,
        "values": [{"name": v.name, "number": v.number} for v in enum.values],
    }


def dump_message(msg, messages, enums):
    fields = []
    for field in msg.fields:  # declaration order
        entry = {
            "name": field.name,
            "number": field.number,
            "label": label_of(field),
            "type": TYPE_NAMES[field.type],
            "type_name": None,
            "packed": bool(field.is_packed),
            "oneof": field.containing_oneof.name if field.containing_oneof else None,
        }
        if field.message_type is not None:
            entry["type_name"] = field.message_type.full_name
        elif field.enum_type is not None:
            entry["type_name"] = field.enum_type.full_name
        fields.append(entry)
    messages.append({
        "full_name": msg.full_name,
        "fields": fields,
        "reserved_numbers": [],
        "reserved_names": [],
    })
    for enum in msg.enum_types:
        enums.append(dump_enum(enum))
    for nested in msg.nested_types:
        dump_message(nested, messages, enums)


def add_reserved(file_desc, messages):
    """Reserved ranges/names are only visible on the FileDescriptorProto."""
    proto = descriptor_pb2.FileDescriptorProto()
    file_desc.CopyToProto(proto)
    by_name = {m["full_name"]: m for m in messages}

    def walk(msg_proto, prefix):
        full = f"{prefix}.{msg_proto.name}"
        entry = by_name[full]
        for r in msg_proto.reserved_range:  # end is exclusive
            entry["reserved_numbers"].append([r.start, r.end - 1])
        entry["reserved_names"] = list(msg_proto.reserved_name)
        for nested in msg_proto.nested_type:
            walk(nested, full)

    for msg_proto in proto.message_type:
        walk(msg_proto, proto.package)
    return proto.syntax or "proto2"


def main():
    out = Path(sys.argv[1]) if len(sys.argv) > 1 else DEFAULT_OUT
    file_desc = onnx.ModelProto.DESCRIPTOR.file
    messages, enums = [], []
    for msg in file_desc.message_types_by_name.values():
        dump_message(msg, messages, enums)
    for enum in file_desc.enum_types_by_name.values():
        enums.append(dump_enum(enum))
    syntax = add_reserved(file_desc, messages)
    doc = {
        "generator": "scripts/dump_onnx_schema.py",
        "versions": {"onnx": onnx.__version__, "protobuf": google.protobuf.__version__},
        "proto_file": file_desc.name,
        "package": file_desc.package,
        "syntax": syntax,
        "messages": messages,
        "enums": enums,
    }
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(doc, indent=1) + "\n")
    print(f"{out.relative_to(ROOT) if out.is_relative_to(ROOT) else out}: "
          f"{len(messages)} messages, {len(enums)} enums")


if __name__ == "__main__":
    main()
