#!/usr/bin/env bash
# Runs every fuzz target for a short while (FUZZTIME, default 3s each).
# Crashers that go test finds are written under the package's
# testdata/fuzz/ and then replay in every ordinary 'go test' run.
set -euo pipefail
cd "$(dirname "$0")/.."
t=${FUZZTIME:-3s}
# A failing input is written under testdata/fuzz/ and fails the run. Once in
# a long while the fuzzing engine itself stops a run without one (a worker
# that did not answer in time on a loaded machine, or its first pass over the
# corpus outlasting the fuzz time): that run is shown and tried again, up to
# three times, so that it does not fail the whole test command. (Seen for
# FuzzExtractBytes, whose workers each load OpenCV: in one test run of four
# on 2026-12-02, passing on its second try.)
run() {
  echo "fuzz: $1 $2 ($t)"
  local out
  out=$(mktemp)
  for try in 1 2 3; do
    if go test -run '^$' -fuzz "^$2\$" -fuzztime "$t" "$1" >"$out" 2>&1; then
      rm -f "$out"
      return 0
    fi
    if grep -q 'Failing input written to' "$out" || [ "$try" = 3 ]; then
      cat "$out"
      rm -f "$out"
      return 1
    fi
    echo "fuzz: $2 stopped without a failing input; again. Its last lines:"
    tail -n 5 "$out"
  done
}
run ./calibrate/vernier FuzzParseAngle
run ./calibrate/vernier FuzzReadCSV
run ./cmd/lineshot FuzzParseProfileCSV
run ./cmd/lineshot FuzzParseSettings
run ./cmd/lineshot FuzzLineList
run ./cmd/lineshot FuzzCalibrationJSON
run ./imaging FuzzExtractBytes
