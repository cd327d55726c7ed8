#!/usr/bin/env bash
# Regenerates the demo photos in testdata/demo/ with the simulator. The
# scenario is invented: the teaching lab of Larkspur College, room B12,
# three benches with different gratings and cameras (see testdata/README.md).
set -euo pipefail
cd "$(dirname "$0")/.."
mkdir -p bin
go build -o bin/lineshot ./cmd/lineshot
sim() { bin/lineshot simulate "$@" >/dev/null; }
d=testdata/demo
mkdir -p $d/bench1 $d/bench2 $d/bench3
# Bench 1: a 720p webcam behind a 300 lines/mm grating, slightly rolled.
sim --lamp mercury  --lines-per-mm 300 --size 1280x720 --tilt 2.5 --psf 1.5 --quality 85 --seed 101 -o $d/bench1/mercury.jpg
sim --lamp hydrogen --lines-per-mm 300 --size 1280x720 --tilt 2.5 --psf 1.5 --quality 85 --seed 102 -o $d/bench1/hydrogen.jpg
# Bench 2: a phone (1080p) on a bracket behind a 600 lines/mm grating.
sim --lamp mercury  --lines-per-mm 600 --size 1920x1080 --tilt -3 --quality 90 --seed 201 -o $d/bench2/mercury.jpg
sim --lamp hydrogen --lines-per-mm 600 --size 1920x1080 --tilt -3 --quality 90 --seed 202 -o $d/bench2/hydrogen.jpg
# Bench 3: helium calibration lamp, 1000 lines/mm, phone.
sim --lamp helium   --lines-per-mm 1000 --size 1920x1080 --tilt 1 --quality 90 --seed 301 -o $d/bench3/helium.jpg
sim --lamp hydrogen --lines-per-mm 1000 --size 1920x1080 --tilt 1 --quality 90 --seed 302 -o $d/bench3/hydrogen.jpg
du -sh $d
