#!/usr/bin/env bash
# Speed and memory, measured in one run on this machine and printed as
# ratios (absolute times on shared machines are noise):
#   - whole measurement / decode alone, 12 MP phone JPEG and 1080p JPEG;
#   - batch throughput with 2 workers / with 1 (100 photos of 10 benches);
#   - peak resident memory against one decoded frame per worker, and how it
#     grows from a batch of 100 photos to one of 1000.
# The photos are rendered by the simulator into the temp folder once.
set -euo pipefail
cd "$(dirname "$0")/.."
source scripts/setup.sh
mkdir -p bin
go build -o bin/lineshot ./cmd/lineshot
go build -o bin/peakrss ./scripts/peakrss
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT

echo "== stages (imaging): decode, locate, straighten"
go test -run '^$' -bench 'BenchmarkDecode|BenchmarkExtract' -benchtime 5x ./imaging | grep Benchmark | tee "$tmp/img.txt"
echo "== the band search's reduction: beside the decode, between its stripes, after it (fastest of 15, ms)"
go test -run '^$' -bench 'BenchmarkReduceBesideDecode' -benchtime 15x ./imaging | grep Benchmark
echo "== the machine's own scaling on two goroutines (time on one / on two, fastest of three)"
go test -run '^$' -bench 'BenchmarkTwoGoroutines' -benchtime 3x ./imaging | grep Benchmark
echo "== whole measurement against decode (same run)"
go test -run '^$' -bench 'BenchmarkMeasure' -benchtime 10x ./cmd/lineshot | grep Benchmark | tee "$tmp/measure.txt"
echo "== batch, 1 and 2 workers"
go test -run '^$' -bench 'BenchmarkBatch' -benchtime 4x ./cmd/lineshot | grep Benchmark | tee "$tmp/batch.txt"

echo
echo "== ratios"
awk '/BenchmarkMeasure/ { for (i = 1; i <= NF; i++) { if ($(i+1) == "measure/decode") r = $i; if ($(i+1) == "fastest-measure/decode") f = $i; if ($(i+1) == "fastest-measure/imread") c = $i }
     printf "measure/decode %-22s %.2f mean, %.2f fastest over fastest (target ≤ 1.5 for 12 MP); over OpenCV imread'"'"'s decode %.2f\n", $1, r, f, c }' "$tmp/measure.txt"
awk 'function m(name) { for (i = 1; i <= NF; i++) if ($(i+1) == name) return $i }
     /BenchmarkBatch\/jobs=1,serial/ { ser = m("photos/s"); serB = m("best-photos/s"); next }
     /BenchmarkBatch\/jobs=1/ { one = m("photos/s") }
     /BenchmarkBatch\/jobs=2/ { two = m("photos/s"); twoB = m("best-photos/s") }
     END { printf "batch of 100 photos, throughput 2 workers / 1 worker, one goroutine a photo: %.2f mean, %.2f fastest runs (target ≥ 1.7)\n", two / ser, twoB / serB
           printf "batch throughput 2 workers / 1 worker spreading each photo over the CPUs: %.2f\n", two / one }' "$tmp/batch.txt"

big=$(ls "${TMPDIR:-/tmp}"/lineshot-bench-mercury-4032x3024-1.jpg)
frame=$((4032 * 3024 * 3 / 1024)) # KiB of one decoded 8-bit BGR frame
one=$(bin/peakrss bin/lineshot measure "$big" 2>/dev/null | tail -1)
mkdir -p "$tmp/lab/b1" "$tmp/lab/b2"
for b in b1 b2; do for k in 1 2; do cp "$big" "$tmp/lab/$b/hg$k.jpg"; done; done
two=$(bin/peakrss bin/lineshot batch -j 2 --quiet --out "$tmp/out" "$tmp/lab" 2>/dev/null | tail -1)
# The program before it reads any photo: mostly the pages of the shared
# libraries Debian's OpenCV pulls in (GDAL, Qt, poppler, ...), which
# ru_maxrss counts too.
idle=$(bin/peakrss bin/lineshot help 2>/dev/null | tail -1)
awk -v one="$one" -v two="$two" -v f="$frame" -v idle="$idle" 'BEGIN {
  printf "peak RSS, the idle program: %.0f MiB\n", idle/1024
  printf "peak RSS, measure 12 MP: %.0f MiB = %.2f frames + 60 MiB (target ≤ 2.5 frames per worker + 60 MiB); %.2f frames above the idle program\n", one/1024, (one - 61440) / f, (one - idle) / f
  printf "peak RSS, batch -j 2 on 12 MP photos: %.0f MiB = %.2f frames per worker + 60 MiB; %.2f above the idle program\n", two/1024, (two - 61440) / f / 2, (two - idle) / f / 2 }'

echo "== a class's worth: 100 12 MP phone photos in two benches, default --jobs"
mkdir -p "$tmp/class/b1" "$tmp/class/b2"
for k in $(seq 1 50); do for b in b1 b2; do ln "$big" "$tmp/class/$b/hg$k.jpg" 2>/dev/null || cp "$big" "$tmp/class/$b/hg$k.jpg"; done; done
t0=$(date +%s.%N)
bin/lineshot batch --quiet --out "$tmp/class-out" "$tmp/class" >/dev/null 2>&1 || true
t1=$(date +%s.%N)
awk -v a="$t0" -v b="$t1" -v n="$(nproc)" 'BEGIN { printf "100 photos in %.1f s on %d CPUs: %.1f photos/s, 300 in about %.0f s\n", b - a, n, 100 / (b - a), 300 * (b - a) / 100 }'


echo "== peak memory against the batch's size: 100 and 1000 1080p photos, -j 2"
class="${TMPDIR:-/tmp}/lineshot-bench-class" # made by BenchmarkBatch above
mkdir -p "$tmp/thousand"
for k in $(seq 0 9); do
  for b in "$class"/b*; do
    mkdir -p "$tmp/thousand/r$k/$(basename "$b")"
    for f in "$b"/*.jpg; do ln "$f" "$tmp/thousand/r$k/$(basename "$b")/" 2>/dev/null || cp "$f" "$tmp/thousand/r$k/$(basename "$b")/"; done
  done
done
# Page faults a photo with one worker and with two (less the idle
# program's): memory handed back and faulted in again shows here.
f0=$(bin/peakrss -faults bin/lineshot help 2>/dev/null | tail -1)
f1=$(bin/peakrss -faults bin/lineshot batch -j 1 --photo-threads 1 --quiet --out "$tmp/of1" "$class" 2>/dev/null | tail -1)
f2=$(bin/peakrss -faults bin/lineshot batch -j 2 --quiet --out "$tmp/of2" "$class" 2>/dev/null | tail -1)
awk -v a="$f0" -v b="$f1" -v c="$f2" 'BEGIN { printf "page faults a photo, batch of 100 1080p photos: %.0f with 1 worker, %.0f with 2\n", (b - a) / 100, (c - a) / 100 }'
p100=$(bin/peakrss bin/lineshot batch -j 2 --quiet --out "$tmp/o100" "$class" 2>/dev/null | tail -1)
p1000=$(bin/peakrss bin/lineshot batch -j 2 --quiet --out "$tmp/o1000" "$tmp/thousand" 2>/dev/null | tail -1)
awk -v a="$p100" -v b="$p1000" 'BEGIN { printf "peak RSS, batch of 100 photos %.0f MiB, of 1000 photos %.0f MiB: %.2f times\n", a/1024, b/1024, b/a }'
