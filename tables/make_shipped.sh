#!/usr/bin/env bash
# Rebuild the tables that ship inside the package (run from the repository root).
set -euo pipefail
note() { echo "shipped with ctmtab; cap $1, the busy beaver value"; }
for spec in "1 1" "2 6" "3 21" "4 107"; do
    set -- $spec
    ctmtab build --states "$1" --symbols 2 --max-steps "$2" -o "tables/1d-n$1-m2-t$2.ctmt" \
        --builder "ctmtab project" --notes "$(note "S($1) = $2")" -q
done
ctmtab build --states 2 --symbols 3 --max-steps 38 -o tables/1d-n2-m3-t38.ctmt \
    --builder "ctmtab project" --notes "$(note "S(2,3) = 38")" -q
