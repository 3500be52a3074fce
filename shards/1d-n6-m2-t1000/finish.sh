#!/usr/bin/env bash
# Once all 16 shard files are here: merge them into the cut table, check every invariant, and
# print what it covers and what the cap left, for the README. Needs ctmtab installed.
set -euo pipefail
cd "$(dirname "$0")"
shards=()
for i in $(seq 0 15); do
  f=ctm-1d-n6-m2-t1000-shard${i}of16.ctmt
  [ -e "$f" ] || { echo "finish.sh: $f is missing; build it with run.sh first" >&2; exit 2; }
  shards+=("$f")
done
out=${OUT:-ctm-1d-n6-m2-t1000-upto18.ctmt}
python3 -m ctmtab merge -o "$out" "${shards[@]}" --builder "${CTMTAB_BUILDER:-ctmtab team}" \
  --notes "1D (6,2) at cap 1000 (chosen from the data, shards/1d-n6-m2-t1000/README.md), keys kept up to length 18"
python3 -m ctmtab verify "$out"
python3 -m ctmtab info "$out"
python3 cap_report.py "${shards[@]}"
