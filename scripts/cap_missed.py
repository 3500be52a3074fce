"""What the cap-500 1D (5,2) table misses, against the exact one (docs/BUILDS.md, "What cap 500 missed").

python3 scripts/cap_missed.py  -- prints the figures docs/BUILDS.md gives, from the two shipped tables."""
import math
from collections import Counter

from ctmtab.tables import load

short, exact = load("1d-n5-m2-t500"), load("1d-n5-m2-t47176870-exact")
nodes = exact.header["stats"]["halting_nodes"] - short.header["stats"]["halting_nodes"]
print(f"late halts: {nodes:,} tree nodes, {exact.halting - short.halting:,} machines, "
      f"{exact.total - short.total:,} runs ({(exact.total - short.total) / exact.total:.2g} of the halting runs)")
before, after = dict(short.items()), dict(exact.items())
new = [k for k in after if k not in before]
gained = [k for k in before if after[k] != before[k]]
unchanged = min(len(k) for k in new + gained) - 1
shift = math.log2(short.total) - math.log2(exact.total)
print(f"keys up to length {unchanged} keep their counts; their CTM moves by {shift:.2g} bits (the total alone)")
gains = sorted((math.log2(after[k] / before[k]), k) for k in gained)
print(f"{len(gained)} keys gain count (lengths {min(map(len, gained))} to {max(map(len, gained))}); "
      f"largest gain {gains[-1][0]:.3f} bits, e.g. {gains[-1][1]} ({before[gains[-1][1]]} -> {after[gains[-1][1]]})")
print(f"{len(new)} new keys, lengths {min(map(len, new))} to {max(map(len, new))}; by length: "
      + ", ".join(f"{n}: {c}" for n, c in sorted(Counter(map(len, new)).items())[:8]) + " ...")
best = min(new, key=exact.ctm)
print(f"most probable new key: CTM {exact.ctm(best):.2f} bits, length {len(best)}: {best}")
outside = [k for k in before if not short.interval(k)[0] - 1e-9 <= exact.ctm(k) <= short.interval(k)[1] + 1e-9]
below = [k for k in new if exact.ctm(k) < short.interval(k)[0] - 1e-9]
print(f"exact values outside the cap-500 certified intervals: {len(outside)}; new keys below its bound: {len(below)}")
