#!/usr/bin/env bash
# Rebuild the tables that ship inside the package (on a machine with at least 2 cores; the
# last builds take minutes, the optional (6,2) one hours). Paths are from the repository root.
set -euo pipefail
cd "$(dirname "$0")/.."
note() { echo "shipped with ctmtab; cap $1"; }
for spec in "1 1" "2 6" "3 21" "4 107"; do
    set -- $spec
    ctmtab build --states "$1" --symbols 2 --max-steps "$2" -o "tables/1d-n$1-m2-t$2.ctmt" \
        --builder "ctmtab project" --notes "$(note "S($1) = $2, the busy beaver value")" -q
done
ctmtab build --states 2 --symbols 3 --max-steps 38 -o tables/1d-n2-m3-t38.ctmt \
    --builder "ctmtab project" --notes "$(note "S(2,3) = 38, the busy beaver value")" -q
# Run-ons (--settle-size): every node undecided at the cap that still fits the size is run on until
# it halts, repeats or outgrows it, so every key up to that size has tight certified bounds.
for n in 1 2 3; do
    ctmtab build --dims 2 --states "$n" --symbols 2 --max-steps 2000 --settle-size 4 -o "tables/2d-n$n-m2-t2000.ctmt" \
        --builder "ctmtab project" --notes "$(note "2000, as in the published 2D (4,2) table")" -q
done
# Exact: at S(2,4) = 3,932,964 every run left undecided is proven non-halting by the bound.
ctmtab build --states 2 --symbols 4 --max-steps 3932964 -o tables/1d-n2-m4-t3932964-exact.ctmt \
    --builder "ctmtab project" --notes "$(note "S(2,4) = 3,932,964, the busy beaver value: exact")" -q
# Caps chosen from the undecided weight and the widest interval by size against the cap (docs/BUILDS.md).
ctmtab build --states 3 --symbols 3 --max-steps 10000 --settle-size 12 -o tables/1d-n3-m3-t10000.ctmt \
    --builder "ctmtab project" --notes "$(note "10000, where longer caps stop narrowing the intervals")" -q
ctmtab build --dims 2 --states 2 --symbols 3 --max-steps 2000 --settle-size 4 -o tables/2d-n2-m3-t2000.ctmt \
    --builder "ctmtab project" --notes "$(note "2000, as for the binary 2D tables")" -q
ctmtab build --states 5 --symbols 2 --max-steps 500 --settle-size 16 -o tables/1d-n5-m2-t500.ctmt \
    --builder "ctmtab project" --notes "$(note "500, as in the published (5,2) table")" -q
ctmtab build --dims 2 --states 4 --symbols 2 --max-steps 2000 --settle-size 4 -o tables/2d-n4-m2-t2000.ctmt \
    --builder "ctmtab project" --notes "$(note "2000, as in the published 2D (4,2) table")" -q
# Exact (5,2): about 51 minutes on 2 cores (docs/BUILDS.md, "The exact 1D (5,2) table").
ctmtab build --states 5 --symbols 2 --max-steps 47176870 --budget-hours 200 \
    -o tables/1d-n5-m2-t47176870-exact.ctmt --builder "ctmtab project" \
    --notes "$(note "S(5) = 47,176,870, the busy beaver value: exact")" -q
# Sampled: 10^9 machines of the 1D (4,4) space (4 symbols, as for DNA), about 5 minutes on 2 cores.
ctmtab build --states 4 --symbols 4 --max-steps 2000 --sample 1000000000 --seed 2026 \
    -o tables/1d-n4-m4-t2000-sampled.ctmt --builder "ctmtab project" \
    --notes "shipped with ctmtab; sampled, 10^9 uniform machines, cap 2000" -q
# Every 4x4 array, exhaustively: 2D (5,2) at cap 100, keys kept up to 4x4 and settled there (the
# kept size is the default settle size; about 20 minutes on 2 cores; past cap 100 the undecided
# share barely falls and the cost grows, docs/BUILDS.md).
ctmtab build --dims 2 --states 5 --symbols 2 --max-steps 100 --keep-size 4 \
    -o tables/2d-n5-m2-t100-upto4.ctmt --builder "ctmtab project" \
    --notes "$(note "100, keys kept up to 4x4: every 4x4 array, from every machine")" -q
# 1D (6,2) at cap 1,000, keys kept up to length 18: about 6 CPU-hours, so it is built as 16
# resumable shards (run.sh; any mix of machines, rerun it until all 16 files exist), then merged
# and verified (finish.sh). Skipped unless asked for: CTMTAB_WITH_6=1 scripts/make_shipped.sh
if [ "${CTMTAB_WITH_6:-0}" = 1 ]; then
    CTMTAB_BUILDER="ctmtab project" shards/1d-n6-m2-t1000/run.sh
    CTMTAB_BUILDER="ctmtab project" shards/1d-n6-m2-t1000/finish.sh
    mv shards/1d-n6-m2-t1000/ctm-1d-n6-m2-t1000-upto18.ctmt tables/1d-n6-m2-t1000-upto18.ctmt
fi
