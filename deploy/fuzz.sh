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
    log=$(mktemp)
    if ! go test -run '^$' -fuzz "^${target}\$" -fuzztime "$t" -fuzzminimizetime 2s "$pkg" >"$log" 2>&1; then
      # A crash names its input ("Failing input written to testdata/fuzz/…")
      # and fails the run. The fuzzing engine can also stop on its own
      # deadline while it minimises a new input ("context deadline
      # exceeded"), which is no finding: that case is run once more.
      if grep -q "Failing input written" "$log" || ! grep -q "context deadline exceeded" "$log"; then
        cat "$log"; rm -f "$log"; exit 1
      fi
      echo "fuzz: $target stopped on the engine's deadline, not on an input; running it again"
      # A second failure fails the script whatever its cause: a run that
      # did not finish is not a passed run.
      if ! go test -run '^$' -fuzz "^${target}\$" -fuzztime "$t" -fuzzminimizetime 2s "$pkg" >"$log" 2>&1; then
        cat "$log"; rm -f "$log"
        echo "fuzz: $target failed twice"; exit 1
      fi
    fi
    rm -f "$log"
  done
done
echo "fuzz: every target ran without a failure"
