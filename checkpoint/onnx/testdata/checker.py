"""Runs the ONNX checker of Debian's python3-onnx on the fixture models that
checkpoint/onnx's tests commit under testdata/models, and prints the verdicts
as JSON (testdata/references.sh writes them to testdata/checker.json, which
TestCheckerVerdict reads; the tests never run Python).

For each model: onnx.checker.check_model with full_check=True (the model's
structure, every node against its operator schema at the model's opset, and
strict shape inference), and the output shapes that ONNX's shape inference
derives from the graph alone, with the exporter's declared output shapes
removed first ("?" for a dimension it cannot name).

control-*.onnx models are broken on purpose (by the Go test that writes the
fixtures) to show that the checker does reject a bad model."""
import hashlib
import json
import os
import sys

import onnx
from onnx import checker, shape_inference


def dim_name(d):
    """A dimension's size, its symbolic name, or "?" when inference could
    not name it (or made a name of its own, "unk__N")."""
    if d.HasField("dim_value"):
        return str(d.dim_value)
    if d.HasField("dim_param") and not d.dim_param.startswith("unk__"):
        return d.dim_param
    return "?"


here = os.path.dirname(os.path.abspath(__file__))
models = os.path.join(here, "models")
report = {"onnx_version": onnx.__version__, "models": []}
for name in sorted(os.listdir(models)):
    if not name.endswith(".onnx"):
        continue
    raw = open(os.path.join(models, name), "rb").read()
    model = onnx.load_from_string(raw)
    entry = {
        "file": name,
        "sha256": hashlib.sha256(raw).hexdigest(),
        "ir_version": model.ir_version,
        "opset": max(o.version for o in model.opset_import if o.domain in ("", "ai.onnx")),
    }
    try:
        checker.check_model(model, full_check=True)
        entry["checker"] = "passed"
    except Exception as e:  # the verdict is the message
        entry["checker"] = "failed: " + str(e).strip().splitlines()[0]
    bare = onnx.ModelProto()
    bare.CopyFrom(model)
    for o in bare.graph.output:
        o.type.tensor_type.ClearField("shape")
    try:
        inferred = shape_inference.infer_shapes(bare, strict_mode=True)
    except Exception:
        inferred = bare
    shapes = {}
    for o in list(inferred.graph.output) + list(inferred.graph.value_info):
        if o.name in [x.name for x in model.graph.output] and o.name not in shapes:
            dims = o.type.tensor_type.shape.dim
            if o.type.tensor_type.HasField("shape"):
                shapes[o.name] = [dim_name(d) for d in dims]
    entry["inferred_outputs"] = shapes
    report["models"].append(entry)
json.dump(report, sys.stdout, indent=1, sort_keys=True)
print()
