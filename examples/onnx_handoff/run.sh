#!/usr/bin/env bash
# Hand an ONNX file to another team: train on the demo data, emit ONNX, verify it, and let a
# consumer that knows nothing of nodecast (onnxruntime and the standard library only) use it.
# Usage: bash examples/onnx_handoff/run.sh [OUTPUT_FOLDER]
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
out=${1:-$here/out}
mkdir -p "$out"

nodecast demo --data-only -o "$out"
nodecast train "$out/readings.csv" --target heatsink_temp \
  --domain ambient_temp=10:45,fan_speed=800:4000,load_current=0:30,supply_voltage=22:26 \
  --units ambient_temp=degC,fan_speed=rpm,load_current=A,supply_voltage=V,heatsink_temp=degC \
  --nodes 300 --seed 7 -o "$out/fan.ncast" --overwrite
# float64: a runtime may sum a float32 Gemm in any order, so a float32 graph's certified bound is
# too loose for verify's default budget (5% of the model's validation RMSE); see docs/verification.md
nodecast emit "$out/fan.ncast" --to onnx --precision float64 --flag-out-of-domain \
  -o "$out/fan.onnx" --overwrite
nodecast verify "$out/fan.ncast" "$out/fan.onnx" --data "$out/held_out.csv" --report "$out/verify.json" --overwrite

# The other team's side: no nodecast import, only the file and its metadata.
python3 "$here/consumer.py" "$out/fan.onnx" "$out/held_out.csv" > "$out/predictions.csv"
echo "predictions in $out/predictions.csv"
