"""A consumer of a nodecast ONNX file that knows nothing of nodecast.

It learns the input order, units and declared domain from the model's metadata, reads a CSV by
column name, warns about rows outside the domain, and writes one prediction per row.
Needs only onnxruntime, NumPy and the standard library.
Usage: python3 consumer.py MODEL.onnx DATA.csv > predictions.csv
"""

import csv
import json
import sys

import numpy as np
import onnxruntime as ort


def main(model_path: str, data_path: str) -> int:
    session = ort.InferenceSession(model_path, providers=["CPUExecutionProvider"])
    meta = session.get_modelmeta().custom_metadata_map
    features = json.loads(meta["nodecast.feature_names"])
    units = json.loads(meta["nodecast.feature_units"])
    domain = np.array(json.loads(meta["nodecast.domain"]))
    targets = json.loads(meta["nodecast.target_names"])
    dtype = np.float32 if meta["nodecast.precision"] == "float32" else np.float64
    described = ", ".join(f"{f} [{u}]" for f, u in zip(features, units, strict=True))
    print(f"model inputs: {described}", file=sys.stderr)

    with open(data_path, newline="", encoding="utf-8-sig") as handle:
        rows = list(csv.DictReader(handle))
    X = np.array([[float(row[name]) for name in features] for row in rows], dtype=dtype)
    outside = np.any((X < domain[:, 0]) | (X > domain[:, 1]), axis=1)
    if outside.any():
        print(f"warning: {int(outside.sum())} row(s) outside the declared domain", file=sys.stderr)

    outputs = session.run(["outputs"], {meta["nodecast.input"]: X})[0]
    writer = csv.writer(sys.stdout, lineterminator="\n")
    writer.writerow(targets)
    writer.writerows([[repr(float(v)) for v in row] for row in outputs])
    return 0


if __name__ == "__main__":
    sys.exit(main(*sys.argv[1:3]))
