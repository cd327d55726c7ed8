#!/usr/bin/env bash
# Runs every fuzz target for a short while (FUZZTIME, default 3s each).
# Crashers that go test finds are written under the package's
# testdata/fuzz/ and then replay in every ordinary 'go test' run.
set -euo pipefail
cd "$(dirname "$0")/.."
t=${FUZZTIME:-3s}
run() { echo "fuzz: $1 $2 ($t)"; go test -run '^$' -fuzz "^$2\$" -fuzztime "$t" "$1" >/dev/null; }
run ./calibrate/vernier FuzzParseAngle
run ./calibrate/vernier FuzzReadCSV
run ./cmd/lineshot FuzzParseProfileCSV
run ./cmd/lineshot FuzzParseSettings
run ./cmd/lineshot FuzzLineList
run ./cmd/lineshot FuzzCalibrationJSON
run ./imaging FuzzExtractBytes
