#!/usr/bin/env bash
# Runs the benchmarks behind Halfmark's performance claims and prints one
# table of ratios, each measured against its baseline in the same run.
#   deploy/bench.sh            (HALFMARK_TEST_DATABASE_URL speeds up the database benchmarks)
set -euo pipefail
cd "$(dirname "$0")/.."
out=$(mktemp)
trap 'rm -f "$out"' EXIT
run() { echo "bench: $*" >&2; go test -run '^$' "$@" | tee -a "$out" >&2; }

run -bench '^BenchmarkIngest10kVsCopy$' -benchtime 5x ./api
run -bench '^BenchmarkEvaluation$' -benchtime 1x ./worker
run -bench '^BenchmarkFrontPageVsStatic$' -benchtime 1x ./web
run -bench '^Benchmark(Analyze400|SinglePass400)$' -benchtime 20000x ./analysis/profile
run -bench '^Benchmark(AnalyzeField1024x768|SinglePass1024x768|Picket60)$' -benchtime 20x ./analysis/epid

metric() { # metric BENCH UNIT -> the value reported before UNIT on the line of BENCH (a name prefix)
  awk -v b="$1" -v u="$2" 'index($1, b) == 1 { for (i = 2; i <= NF; i++) if ($i == u) v = $(i-1) } END { print v }' "$out"
}
ratio() { awk -v a="$1" -v b="$2" 'BEGIN { if (a == "" || b == "" || b == 0) print "n/a"; else printf "%.2f", a / b }'; }
ms() { awk -v a="$1" 'BEGIN { if (a == "") print "n/a"; else printf "%.1f", a / 1e6 }'; }
secs() { awk -v a="$1" 'BEGIN { if (a == "") print "n/a"; else printf "%.1f", a / 1e9 }'; }

printf '\n%-58s %12s %10s\n' "measure (same-run baseline)" "result" "target"
printf '%-58s %12s %10s\n' "ingest 10,000 edge results: API speed / raw pgx COPY, same data" "$(metric BenchmarkIngest10kVsCopy- api_vs_copy)" "≥ 0.5"
printf '%-58s %12s %10s\n' "full evaluation 2,000×500: evaluate time / read time" "$(metric BenchmarkEvaluation/read eval/read)" "≤ 2"
# The ratio alone improves when the read gets slower: the whole job's time
# (read, evaluate, store verdicts and alerts) is printed beside it.
printf '%-58s %12s %10s\n' "full evaluation 2,000×500: whole job (s)" "$(secs "$(metric BenchmarkEvaluation/full-job ns/op)")" "—"
printf '%-58s %12s %10s\n' "  of which read (ms) / evaluate (ms)" "$(metric BenchmarkEvaluation/read read-ms) / $(metric BenchmarkEvaluation/read evaluate-ms)" "—"
printf '%-58s %12s %10s\n' "front page (50×4×6): requests/s / static file requests/s" "$(metric BenchmarkFrontPageVsStatic- front/static)" "≥ 0.3"
printf '%-58s %12s %10s\n' "profile analysis (400 samples) / one pass over samples" "$(ratio "$(metric BenchmarkAnalyze400- ns/op)" "$(metric BenchmarkSinglePass400- ns/op)")" "≤ 20"
printf '%-58s %12s %10s\n' "EPID field analysis 1024×768 (ms per image)" "$(ms "$(metric BenchmarkAnalyzeField1024x768- ns/op)")" "≤ 50"
printf '%-58s %12s %10s\n' "EPID field analysis / one pass over pixels" "$(ratio "$(metric BenchmarkAnalyzeField1024x768- ns/op)" "$(metric BenchmarkSinglePass1024x768- ns/op)")" "—"
printf '%-58s %12s %10s\n' "picket fence, 36 exposed pairs × 5 strips (ms per image)" "$(ms "$(metric BenchmarkPicket60- ns/op)")" "—"
