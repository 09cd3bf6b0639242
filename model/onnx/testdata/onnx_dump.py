"""Prints what ONNX's own Python reader (Debian python3-onnx) sees in model
and tensor files, one JSON object per line, for onnx_python_test.go.

Reads lines "model PATH", "check PATH" (model, after
onnx.checker.check_model with full_check) or "tensor PATH" from stdin. Values are the first
LIMIT elements of numpy_helper.to_array, as strings: repr(float) for floats
(exact; 'nan' and 'inf' included), str(int) for integers and bools, base64
for strings; "sha256" hashes all of them (see whole()).

A model also gets "lines": its whole graph written out in a canonical text
(canonical()), every node with its name, domain, op type, input and output
names and every attribute's value (tensors by whole() digest, subgraphs
written out in turn), every initializer, graph input, output and value_info,
and the model-local functions. python_test.go writes the same text from the
Go decode and compares line by line.
"""
import base64
import hashlib
import json
import struct
import sys

import onnx
from onnx import numpy_helper, TensorProto

LIMIT = 32


def dim(d):
    which = d.WhichOneof("value")
    if which == "dim_value":
        return d.dim_value
    if which == "dim_param":
        return d.dim_param
    return None


def value_info(v):
    t = v.type
    kind = t.WhichOneof("value") or ""
    out = {"name": v.name, "kind": kind}
    if kind in ("tensor_type", "sparse_tensor_type"):
        tt = getattr(t, kind)
        out["elem"] = tt.elem_type
        out["dims"] = [dim(d) for d in tt.shape.dim] if tt.HasField("shape") else None
    return out


def values(t):
    if t.data_type in (TensorProto.COMPLEX64, TensorProto.COMPLEX128):
        return {"skip": "complex"}
    if t.data_type == TensorProto.STRING:
        # to_array decodes strings to str; compare the stored bytes.
        return {"b64": [base64.b64encode(x).decode() for x in t.string_data[:LIMIT]]}
    try:
        a = numpy_helper.to_array(t).flatten()[:LIMIT]
    except Exception as e:  # report, do not hide
        return {"error": repr(e)}
    if a.dtype.kind == "f":
        return {"vals": [repr(float(x)) for x in a]}
    return {"vals": [str(int(x)) for x in a]}


def whole(t):
    """sha256 of every value of t, as little-endian bytes at t's dtype
    (numpy_helper.to_array's array, bfloat16 turned back from float32 to
    its 16 bits); for strings, each string's length as 8 bytes then its
    bytes. "nodata" for a tensor that stores no values."""
    h = hashlib.sha256()
    if t.data_type == TensorProto.STRING:
        for x in t.string_data:
            h.update(struct.pack("<Q", len(x)))
            h.update(x)
        return h.hexdigest()
    fields = ("raw_data", "float_data", "int32_data", "int64_data", "double_data", "uint64_data")
    n = 1
    for d in t.dims:
        n *= d
    if n > 0 and not any(len(getattr(t, f)) for f in fields):
        return "nodata"
    try:
        a = numpy_helper.to_array(t)
    except Exception as e:  # report, do not hide
        return "error " + repr(e)
    if t.data_type == TensorProto.BFLOAT16:
        a = (a.astype("<f4").view("<u4") >> 16).astype("<u2")
    h.update(a.astype(a.dtype.newbyteorder("<")).tobytes())
    return h.hexdigest()


def tensor(t):
    out = {"name": t.name, "dtype": t.data_type, "dims": list(t.dims)}
    out.update(values(t))
    out["sha256"] = whole(t)
    return out


def ints(xs):
    return ",".join(str(x) for x in xs)


def digest(t):
    return "%s %d [%s] %s" % (t.name, t.data_type, ints(t.dims), whole(t))


def sparse(s):
    return "values %s indices %s dims [%s]" % (digest(s.values), digest(s.indices), ints(s.dims))


def type_text(t):
    kind = t.WhichOneof("value") or ""
    if kind not in ("tensor_type", "sparse_tensor_type"):
        return kind
    tt = getattr(t, kind)
    if not tt.HasField("shape"):
        return "%s %d norank" % (kind, tt.elem_type)
    dims = []
    for d in tt.shape.dim:
        which = d.WhichOneof("value")
        if which == "dim_value" and d.dim_value >= 0:
            dims.append(str(d.dim_value))
        elif which == "dim_param" and d.dim_param != "":
            dims.append(d.dim_param)
        else:  # no value, an empty dim_param, or a negative dim_value: unknown
            dims.append("?")
    return "%s %d [%s]" % (kind, tt.elem_type, ",".join(dims))


def f32bits(x):
    return "%08x" % struct.unpack("<I", struct.pack("<f", x))[0]


def attr_lines(a, depth):
    A = onnx.AttributeProto
    head = "%sattr %s %d" % ("  " * depth, a.name, a.type)
    if a.ref_attr_name:
        return [head + " ref " + a.ref_attr_name]
    if a.type == A.FLOAT:
        return [head + " " + f32bits(a.f)]
    if a.type == A.INT:
        return [head + " " + str(a.i)]
    if a.type == A.STRING:
        return [head + " " + base64.b64encode(a.s).decode()]
    if a.type == A.TENSOR:
        return [head + " " + digest(a.t)]
    if a.type == A.SPARSE_TENSOR:
        return [head + " " + sparse(a.sparse_tensor)]
    if a.type == A.TYPE_PROTO:
        return [head + " " + type_text(a.tp)]
    if a.type == A.FLOATS:
        return [head + " " + ",".join(f32bits(x) for x in a.floats)]
    if a.type == A.INTS:
        return [head + " " + ints(a.ints)]
    if a.type == A.STRINGS:
        return [head + " " + ",".join(base64.b64encode(x).decode() for x in a.strings)]
    if a.type == A.TENSORS:
        return [head + " " + " | ".join(digest(t) for t in a.tensors)]
    if a.type == A.SPARSE_TENSORS:
        return [head + " " + " | ".join(sparse(s) for s in a.sparse_tensors)]
    if a.type == A.TYPE_PROTOS:
        return [head + " " + " | ".join(type_text(t) for t in a.type_protos)]
    if a.type == A.GRAPH:
        return [head] + canonical(a.g, depth + 1)
    if a.type == A.GRAPHS:
        out = [head + " %d" % len(a.graphs)]
        for g in a.graphs:
            out += canonical(g, depth + 1)
        return out
    return [head + " ?"]


def node_lines(nodes, depth):
    out = []
    for n in nodes:
        out.append("%snode %s|%s|%s|%s|%s" % ("  " * depth, n.name, n.domain, n.op_type,
                                               ",".join(n.input), ",".join(n.output)))
        for a in n.attribute:
            out += attr_lines(a, depth + 1)
    return out


def canonical(g, depth=0):
    ind = "  " * depth
    out = [ind + "graph " + g.name]
    for what, vis in (("input", g.input), ("output", g.output), ("value_info", g.value_info)):
        out += ["%s%s %s %s" % (ind, what, v.name, type_text(v.type)) for v in vis]
    out += [ind + "initializer " + digest(t) for t in g.initializer]
    out += [ind + "sparse_initializer " + sparse(s) for s in g.sparse_initializer]
    return out + node_lines(g.node, depth)


def functions(m):
    out = []
    for f in m.functions:
        out.append("function %s|%s|%s|%s|%s|%s" % (
            f.domain, f.name, ",".join(f.input), ",".join(f.output), ",".join(f.attribute),
            ",".join(sorted("%s:%d" % (o.domain, o.version) for o in f.opset_import))))
        out += node_lines(f.node, 1)
    return out


def model(path):
    m = onnx.load(path)
    g = m.graph
    return {
        "path": path,
        "ir_version": m.ir_version,
        "opsets": [[o.domain, o.version] for o in m.opset_import],
        "nodes": len(g.node),
        "ops": [n.op_type for n in g.node],
        "initializers": [tensor(t) for t in g.initializer],
        "constants": [tensor(a.t) for n in g.node if n.op_type == "Constant"
                      for a in n.attribute if a.type == onnx.AttributeProto.TENSOR],
        "inputs": [value_info(v) for v in g.input],
        "outputs": [value_info(v) for v in g.output],
        "lines": canonical(g) + functions(m),
    }


def main():
    for line in sys.stdin:
        kind, _, path = line.rstrip("\n").partition(" ")
        try:
            if kind == "model":
                out = model(path)
            elif kind == "check":
                onnx.checker.check_model(onnx.load(path), full_check=True)
                out = model(path)
            else:
                out = tensor(onnx.load_tensor(path))
                out["path"] = path
        except Exception as e:
            out = {"path": path, "load_error": repr(e)}
        print(json.dumps(out))


if __name__ == "__main__":
    main()
