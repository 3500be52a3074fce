"""What tables and builds share, in pure Python and numpy (no compiled core): the machine space,
the proven step bounds, decider names, the symmetries, sampling statistics and streams, and the
Tally, the exact record of a build with its invariants. tables/ reads and writes files from it;
enumerator/ produces it."""
