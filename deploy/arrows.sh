#!/usr/bin/env bash
# Checks the import arrows of the module (DEVELOPERS.md, "What may import
# what"), production and test imports alike:
#   - pgx (github.com/jackc/pgx/...) only in halfmark/db and below;
#   - web never imports api; worker never imports deploy; db never imports
#     analysis;
#   - the root package halfmark imports nothing of the module.
# Every violation is printed. A violation listed in KNOWN below is reported
# as "known, to be removed" and does not fail the check; any other one does.
# Empty KNOWN as the code is fixed.
set -euo pipefail
cd "$(dirname "$0")/.."
export PATH="/usr/local/go/bin:$PATH"

# One line per known violation: "<importing package> -> <imported package>".
KNOWN=(
  # Tests only: web/harness_test.go mounts the real API beside the dashboard
  # (the served handler, end to end); web's own code imports no api.
  "halfmark/web -> halfmark/api"
)

violations=$(go list -f '{{.ImportPath}}|{{join .Imports " "}} {{join .TestImports " "}} {{join .XTestImports " "}}' ./... |
  awk -F'|' '
    {
      pkg = $1; n = split($2, imps, " ")
      for (i = 1; i <= n; i++) {
        imp = imps[i]
        if (imp == "" || seen[pkg, imp]++) continue
        if (imp ~ /^github\.com\/jackc\/pgx/ && pkg != "halfmark/db" && pkg !~ /^halfmark\/db\//) print pkg " -> " imp
        else if ((pkg == "halfmark/web" || pkg ~ /^halfmark\/web\//) && (imp == "halfmark/api" || imp ~ /^halfmark\/api\//)) print pkg " -> " imp
        else if ((pkg == "halfmark/worker" || pkg ~ /^halfmark\/worker\//) && (imp == "halfmark/deploy" || imp ~ /^halfmark\/deploy\//)) print pkg " -> " imp
        else if ((pkg == "halfmark/db" || pkg ~ /^halfmark\/db\//) && (imp == "halfmark/analysis" || imp ~ /^halfmark\/analysis\//)) print pkg " -> " imp
        else if (pkg == "halfmark" && imp ~ /^halfmark\//) print pkg " -> " imp
      }
    }' | sort)

fail=0
while IFS= read -r v; do
  [ -n "$v" ] || continue
  known=0
  for k in "${KNOWN[@]+"${KNOWN[@]}"}"; do [ "$v" = "$k" ] && known=1; done
  if [ $known = 1 ]; then
    echo "arrows: known, to be removed: $v"
  else
    echo "arrows: VIOLATION: $v"
    fail=1
  fi
done <<<"$violations"
for k in "${KNOWN[@]+"${KNOWN[@]}"}"; do
  grep -qxF "$k" <<<"$violations" || echo "arrows: fixed, take it off KNOWN: $k"
done
if [ $fail = 1 ]; then
  echo "arrows: import rules broken (see DEVELOPERS.md, \"What may import what\")"
  exit 1
fi
echo "arrows: ok"
