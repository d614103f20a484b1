#!/usr/bin/env bash
# A CI job, runner-neutral: retrain from the data, emit every target, prove each artifact against
# the new model, and refuse a model that scores worse than the one already shipped.
# Every step writes JUnit XML into $out/junit/ for the CI server; any failed step fails the job.
# Usage: bash examples/ci/model_gate.sh [OUTPUT_FOLDER] [SHIPPED_MODEL.ncast]
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
out=${1:-$here/out}
shipped=${2:-}
mkdir -p "$out/junit"

domain=ambient_temp=10:45,fan_speed=800:4000,load_current=0:30,supply_voltage=22:26
nodecast demo --data-only -o "$out"          # in a real job: fetch this release's data instead
nodecast train "$out/readings.csv" --target heatsink_temp --domain "$domain" --nodes 300 --seed 11 \
  -o "$out/candidate.ncast" --overwrite

nodecast emit "$out/candidate.ncast" --to onnx --precision float64 -o "$out/candidate.onnx" --overwrite
nodecast emit "$out/candidate.ncast" --to python -o "$out/candidate_predictor.py" --overwrite
targets=("$out/candidate.onnx" "$out/candidate_predictor.py")
if command -v "${CC:-gcc}" >/dev/null 2>&1; then   # C is built and run with the host compiler
  nodecast emit "$out/candidate.ncast" --to c -o "$out/candidate_c" --overwrite
  targets+=("$out/candidate_c")
fi

for artifact in "${targets[@]}"; do
  name=$(basename "$artifact")
  nodecast verify "$out/candidate.ncast" "$artifact" --data "$out/held_out.csv" \
    --junit "$out/junit/verify-$name.xml" --report "$out/verify-$name.json" --overwrite
done

gate=(--max-rmse 1.5)
if [ -n "$shipped" ]; then
  gate+=(--baseline "$shipped")
  # how far the behaviour moves (a report here; add --max-change X to make it a gate)
  nodecast diff "$shipped" "$out/candidate.ncast" --data "$out/held_out.csv" \
    --junit "$out/junit/diff.xml" --report "$out/diff.json" --overwrite
fi
nodecast score "$out/candidate.ncast" "$out/held_out.csv" "${gate[@]}" \
  --junit "$out/junit/score.xml" --report "$out/score.json" --overwrite

# The team's own pytest suite can call the same check (see test_shipped_model.py).
NODECAST_MODEL="$out/candidate.ncast" NODECAST_ONNX="$out/candidate.onnx" \
  python3 -m pytest -q "$here/test_shipped_model.py" --junitxml "$out/junit/pytest.xml"
echo "model gate passed: artifacts in $out"
