#!/usr/bin/env bash
# Runs every fuzz target briefly: a number of executions each, sized to
# about 3 s on these machines (their rates differ 300-fold: a JPEG through
# the whole extraction against an angle parser). FUZZTIME, when set (a
# duration like 30s or a count like 5000x), replaces every target's budget.
# Crashers that go test finds are written under the package's
# testdata/fuzz/ and then replay in every ordinary 'go test' run.
#
# Why counts and not seconds: with a duration, Go's fuzzing coordinator
# (Go 1.26) can report "context deadline exceeded" as a failure when the
# time runs out while a worker is mid-input, with no failing input written
# (golang/go#75804, fixed in Go 1.27). A count has no deadline to race. It
# happened here to FuzzExtractBytes on two clean-clone CI runs of two on
# 2026-12-02. A run that stops without a failing input is still shown and
# tried again, up to three times, in case the engine stops for another
# reason; one that writes a failing input fails at once.
set -euo pipefail
cd "$(dirname "$0")/.."
run() {
  local t=${FUZZTIME:-$3}
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
run ./calibrate/vernier FuzzParseAngle 100000x
run ./calibrate/vernier FuzzReadCSV 100000x
run ./cmd/lineshot FuzzParseProfileCSV 15000x
run ./cmd/lineshot FuzzParseSettings 15000x
run ./cmd/lineshot FuzzLineList 10000x
run ./cmd/lineshot FuzzCalibrationJSON 1000x
run ./imaging FuzzExtractBytes 300x
run ./imaging FuzzBandSearch 1000x
