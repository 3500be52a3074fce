"""CPU seconds and a result digest per work unit of one shard, with the installed core:
python3 unit_times.py 7 [FIRST [COUNT]]. Run it under two installs (or two checkouts on
PYTHONPATH) side by side to compare cores: the digests must agree unit for unit."""
import hashlib
import sys
import time

from ctmtab.enumerator.driver import plan
from ctmtab.enumerator.native import core
from ctmtab.model.space import Space
from ctmtab.enumerator.units import TOP, dump_result

CAP, KEEP = 1000, 18


def main(argv):
    shard = int(argv[0])
    first = int(argv[1]) if len(argv) > 1 else 0
    count = int(argv[2]) if len(argv) > 2 else None
    p = plan(Space(1, 6, 2), CAP)
    units = [i for i in p.select((shard, 16)) if i != TOP][first:][:count]  # the top is run by the plan
    total = 0.0
    for i in units:
        u = p.unit(i)
        t = time.process_time()
        r = core.run_unit(1, 6, 2, CAP, p.bits, u.prefix, -1, False, -1, KEEP)
        dt = time.process_time() - t
        total += dt
        r.pop("cuts", None)
        r.pop("holdouts", None)
        digest = hashlib.sha256(dump_result(r)).hexdigest()[:16]
        print(f"unit {i} {'.'.join(map(str, u.prefix))} {dt:.2f} s {digest}", flush=True)
    print(f"total {total:.1f} s over {len(units)} units")


if __name__ == "__main__":
    main(sys.argv[1:])
