#!/usr/bin/env bash
# Installs what is missing and runs every check the project has: gofmt,
# go vet, the whole test suite, the race detector on the batch code, the
# JPEG row decoder under AddressSanitizer and a short run of every fuzz
# target. CI runs exactly this (.ci/run).
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
# The concurrent code under the race detector: the batch, a photo's work
# split over CPUs (imaging), groups of lines fitted side by side (peaks)
# and the lamps tried side by side (calibrate).
go test -count=1 -race -run 'TestBatch(OverALab|InterruptedAndResumed)' ./cmd/lineshot
go test -count=1 -race -run 'TestExtractBandsTwoLamps|TestLitBench$|TestRowsGivenBackChangeNothing|TestDecodeAndReduce|TestRowsIntoAsWhole|TestBandFirstFailures' ./imaging
go test -count=1 -race -run 'TestWorkersDoNotChangeTheResult' ./peaks
go test -count=1 -race -run 'TestBothOrdersClassifiedRight|TestClassif' ./calibrate
# The row decoder's C code (imaging/jpegrows.c) and the HEIF reader's
# (imaging/heif.c) under AddressSanitizer: a read past an Exif block or a
# row buffer, or a libheif message read after its context was freed, fails
# the run (about a minute to build the first time); the fuzz target's
# corpus, HEIC seeds among it, goes through both.
LSAN_OPTIONS="suppressions=$PWD/scripts/lsan.supp" go test -count=1 -asan -run 'TestDecodeRows|TestDecodeAndReduce|TestRowsIntoAsWhole|TestDecodeReduced|TestDamagedJPEG|TestHEIC|FuzzExtractBytes' ./imaging
# Every fuzz target briefly (a count of executions each; FUZZTIME, if set,
# replaces it); found crashers land in testdata/fuzz/.
scripts/fuzz.sh
