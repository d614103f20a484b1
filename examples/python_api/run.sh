#!/usr/bin/env bash
# From a notebook to firmware: fit a scikit-learn Pipeline on a pandas DataFrame, tune it, export
# the fitted object to Python, ONNX and C, and verify every artifact, all from Python.
# Usage: bash examples/python_api/run.sh [OUTPUT_FOLDER]
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
out=${1:-$here/out}
mkdir -p "$out"

nodecast demo --data-only -o "$out"
python3 "$here/notebook.py" "$out"

# The exported predictor reads the CSV the DataFrame came from, by its column names.
python3 -I -S "$out/fan_predictor.py" "$out/held_out.csv" > "$out/predictions.csv"
head -n 3 "$out/predictions.csv"
