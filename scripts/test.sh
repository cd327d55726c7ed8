#!/usr/bin/env bash
# Installs what is missing and runs every check the project has: gofmt,
# go vet and the whole test suite. CI runs exactly this (.ci/run).
set -euo pipefail
cd "$(dirname "$0")/.."
# SciPy: the outside check of peaks/ (TestAgainstSciPy); Chromium: the report in a real browser (TestReportInBrowser)
source scripts/setup.sh python3-scipy chromium
unformatted=$(gofmt -l $(git ls-files '*.go' 2>/dev/null || find . -name '*.go'))
if [ -n "$unformatted" ]; then
  echo "test: gofmt would change: $unformatted" >&2
  exit 1
fi
go vet ./...
go test -count=1 ./...
