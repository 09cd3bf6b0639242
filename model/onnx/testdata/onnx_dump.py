"""Prints what ONNX's own Python reader (Debian python3-onnx) sees in model
and tensor files, one JSON object per line, for onnx_python_test.go.

Reads lines "model PATH", "check PATH" (model, after
onnx.checker.check_model with full_check) or "tensor PATH" from stdin. Values are the first
LIMIT elements of numpy_helper.to_array, as strings: repr(float) for floats
(exact; 'nan' and 'inf' included), str(int) for integers and bools, base64
for strings.
"""
import base64
import json
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


def tensor(t):
    out = {"name": t.name, "dtype": t.data_type, "dims": list(t.dims)}
    out.update(values(t))
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
