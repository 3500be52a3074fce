"""What the cap of 1,000 leaves, from the shard files given (all 16, or those built so far):
the halting weight that halts late, against the weight still undecided, and the undecided
weight by the span its runs had reached (the certificate's record). Run:
    python3 cap_report.py ctm-1d-n6-m2-t1000-shard*of16.ctmt"""
import sys
from collections import defaultdict

from ctmtab.tables import load


def main(paths):
    halting = undecided = space = 0
    by_step = defaultdict(int)
    by_span = defaultdict(int)
    for path in paths:
        t = load(path)
        halting += t.halting
        undecided += t.undecided
        space = t.space_size
        for step, weight in t.steps_hist.items():
            by_step[step] += weight
        for _rows, span, weight in t.certificate.by_size:
            by_span[span] += weight
    print(f"{len(paths)} shard files; space {space:,}; halting {halting:,}; undecided {undecided:,}")
    print(f"undecided / halting = {undecided / halting:.3g}")
    for s in (100, 250, 500, 750, 900, 990):
        late = sum(w for step, w in by_step.items() if step > s)
        print(f"halting weight that halts after step {s}: {late / halting:.3g} of the halting weight")
    print("undecided weight by the span reached at the cap (share of the space; runs that could "
          "still make a key of that length or shorter):")
    reach = 0
    for span in sorted(by_span):
        reach += by_span[span]
        print(f"  span {span}: {by_span[span]:,} ({by_span[span] / space:.3g}); up to {span}: {reach / space:.3g}")


if __name__ == "__main__":
    if len(sys.argv) < 2:
        sys.exit("give the shard files: python3 cap_report.py ctm-1d-n6-m2-t1000-shard*of16.ctmt")
    main(sys.argv[1:])
