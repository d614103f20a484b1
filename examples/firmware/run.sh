#!/usr/bin/env bash
# Firmware: choose a model that q15 fixed point can carry, emit C, build a bare-metal image for a
# Cortex-M4F with a plain Makefile, run it on QEMU's mps2-an386 board, and compare with the model.
# Needs gcc-arm-none-eabi, libnewlib-arm-none-eabi and qemu-system-arm.
# Usage: bash examples/firmware/run.sh [OUTPUT_FOLDER]
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
out=${1:-$here/out}
fw="$out/firmware"
mkdir -p "$fw"

nodecast demo --data-only -o "$out"
# Precision budget: only grid points whose certified q15 export error is within 0.3 degC compete.
nodecast select "$out/readings.csv" --target heatsink_temp \
  --domain ambient_temp=10:45,fan_speed=800:4000,load_current=0:30,supply_voltage=22:26 \
  --units ambient_temp=degC,fan_speed=rpm,load_current=A,supply_voltage=V,heatsink_temp=degC \
  --nodes 50,100,200 --neighbors 10,20 --ridge 1e-6,1e-4,1e-2 --folds 5 \
  --precision q15 --tolerance 0.3 -o "$out/fan.ncast" --overwrite
# The footprint table (host, Cortex-M0, Cortex-M4F) is printed here.
nodecast emit "$out/fan.ncast" --to c --precision q15 --out-of-domain reject --prefix fan \
  --bare-metal -o "$fw" --overwrite
# The accuracy budget is the one chosen above (0.3 degC), not verify's default of 5% of the model's
# validation RMSE, which no q15 artifact of this model can be proven to meet.
nodecast verify "$out/fan.ncast" "$fw" --emulate cortex-m4 --probes 512 --abs-tol 0.3 \
  --report "$out/verify_m4.json" --overwrite

# The firmware engineer's side: an ordinary Makefile and main.c around the generated files.
cp "$here/Makefile" "$here/main.c" "$fw/"
python3 "$here/make_readings.py" "$out/fan.ncast" "$out/held_out.csv" "$fw/readings.h" 16
make -s -C "$fw" clean all
make -s -C "$fw" size
make -s -C "$fw" run
python3 "$here/compare.py" "$out/fan.ncast" "$out/held_out.csv" "$fw/results.txt" "$fw"
