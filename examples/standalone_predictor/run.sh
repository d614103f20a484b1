#!/usr/bin/env bash
# A standalone predictor for a machine where nothing may be installed: emit one Python file, then
# run it with the interpreter isolated from every installed package (-I -S), on a CSV.
# Usage: bash examples/standalone_predictor/run.sh [OUTPUT_FOLDER]
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
out=${1:-$here/out}
mkdir -p "$out"

nodecast demo --data-only -o "$out"
nodecast train "$out/readings.csv" --target heatsink_temp \
  --domain ambient_temp=10:45,fan_speed=800:4000,load_current=0:30,supply_voltage=22:26 \
  --nodes 200 -o "$out/fan.ncast" --overwrite
nodecast emit "$out/fan.ncast" --to python --out-of-domain reject -o "$out/fan_predictor.py" --overwrite
nodecast verify "$out/fan.ncast" "$out/fan_predictor.py" --report "$out/verify.json" --overwrite

# On the target machine: only this file and a Python 3.8+ interpreter.
python3 -I -S "$out/fan_predictor.py" "$out/held_out.csv" > "$out/predictions.csv"
head -n 3 "$out/predictions.csv"
