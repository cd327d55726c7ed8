#!/usr/bin/env bash
# Sets up what is missing, builds lineshot and runs the main job on the
# shipped demo photos: bench 2 of the (invented) Larkspur College teaching
# lab, calibrated on its mercury lamp, then its hydrogen lamp measured and
# the Rydberg constant fitted.
set -euo pipefail
cd "$(dirname "$0")/.."
source scripts/setup.sh
mkdir -p bin
go build -o bin/lineshot ./cmd/lineshot
demo=testdata/demo/bench2
echo "== lineshot measure --calibration-from $demo/mercury.jpg $demo/hydrogen.jpg"
bin/lineshot measure --calibration-from "$demo/mercury.jpg" "$demo/hydrogen.jpg"
