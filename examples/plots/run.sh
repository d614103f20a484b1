#!/usr/bin/env bash
# Pictures of a model: where each hidden node's steep part lies over the domain, and predicted
# against actual values on held-out data. Needs the optional extra: pip install 'nodecast[plot]'.
# Usage: bash examples/plots/run.sh [OUTPUT_FOLDER]
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
out=${1:-$here/out}
mkdir -p "$out"

nodecast demo --data-only -o "$out"
nodecast train "$out/readings.csv" --target heatsink_temp \
  --domain ambient_temp=10:45,fan_speed=800:4000,load_current=0:30,supply_voltage=22:26 \
  --units heatsink_temp=degC --nodes 200 -o "$out/fan.ncast" --overwrite
nodecast inspect "$out/fan.ncast" --plot "$out" --data "$out/held_out.csv" --overwrite
