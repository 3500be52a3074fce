#!/usr/bin/env bash
# The exhaustive 1D (6,2) build at cap 1,000, as 16 shards cut at size 18.
# Each shard resumes from its spool (<file>.parts/) if killed; finished shard files are skipped,
# so running this again on any machine continues the build. Needs ctmtab installed
# (python3 -m pip install .). LANES shards run at once, WORKERS workers each (default 2 x 1: a
# shard ends on one long unit, so a lane per core keeps both cores busy to the end).
# When all 16 files are here, finish.sh merges and verifies them.
set -u
cd "$(dirname "$0")"
LANES=${LANES:-2}
lane() {
  for i in $(seq "$1" "$LANES" 15); do
    f=ctm-1d-n6-m2-t1000-shard${i}of16.ctmt
    [ -e "$f" ] && continue
    echo "shard $i start $(date -u +%FT%TZ)" >> build.log
    python3 -m ctmtab build --states 6 --symbols 2 --max-steps 1000 --shard "$i/16" --keep-size 18 \
      --workers "${WORKERS:-1}" --budget-hours 48 --builder "${CTMTAB_BUILDER:-ctmtab team}" -o "$f" -q
    echo "shard $i rc=$? end $(date -u +%FT%TZ)" >> build.log
  done
}
for l in $(seq 0 $((LANES - 1))); do lane "$l" & done
wait
