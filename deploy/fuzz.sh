#!/usr/bin/env bash
# Runs every fuzz target of the project for a short time each (default 10s):
#   deploy/fuzz.sh [DURATION]
# Any crash fails the script; the failing input is saved under the package's
# testdata/fuzz/ so that `go test` replays it from then on.
set -euo pipefail
cd "$(dirname "$0")/.."
t="${1:-10s}"
grep -rl --include='*_test.go' '^func Fuzz' . | sort | while read -r f; do
  pkg="./$(dirname "${f#./}")"
  for target in $(grep -o '^func Fuzz[A-Za-z0-9_]*' "$f" | sed 's/^func //'); do
    echo "fuzz: $pkg $target for $t"
    go test -run '^$' -fuzz "^${target}\$" -fuzztime "$t" -fuzzminimizetime 2s "$pkg" >/tmp/halfmark-fuzz.log 2>&1 || { cat /tmp/halfmark-fuzz.log; exit 1; }
  done
done
echo "fuzz: every target ran without a failure"
