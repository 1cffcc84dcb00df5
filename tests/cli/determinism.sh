#!/usr/bin/env bash
# Determinism: `bandlink run` gives the same bytes for 1 and 2 threads and for repeated runs with the
# same seed (permutation tests included), apart from the clock times and the recorded thread count.
# The comparison of fits.json uses python's json module (RFC 8259 parser) to drop the time fields.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
PY=/usr/bin/python3
[ -x "$PY" ] || skip "/usr/bin/python3 missing"
work=$tmp
cd "$work"
"$BANDLINK" simulate "$BL_SOURCE_ROOT/tests/cli/simulate_small.json" --out study --quiet || bail "simulate"
for r in t1a:1 t1b:1 t2:2; do
    name=${r%%:*}
    threads=${r##*:}
    "$BANDLINK" run study/study.json --out "$name" --threads "$threads" --seed 11 --permutations 12 --quiet ||
        bail "run $name"
done
tally "$PY" - t1a t1b t2 <<'PY'
import json, os, re, sys
TIMES = {"started", "finished", "stage_seconds", "seconds", "threads"}
def strip(o):
    if isinstance(o, dict):
        return {k: strip(v) for k, v in o.items() if k not in TIMES}
    if isinstance(o, list):
        return [strip(v) for v in o]
    return o
clock = re.compile(rb"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ|\d+(\.\d+)? s\b|<dt>threads</dt><dd>\d+</dd>")
def same(a, b, f):
    x, y = open(os.path.join(a, f), "rb").read(), open(os.path.join(b, f), "rb").read()
    if f in ("fits.json", "provenance.json"):
        return strip(json.loads(x)) == strip(json.loads(y))
    if f == "report.html":
        return clock.sub(b"", x) == clock.sub(b"", y)
    return x == y
def files(d):
    return sorted(os.path.relpath(os.path.join(r, f), d) for r, _, fs in os.walk(d) for f in fs)
passed = failed = 0
base = sys.argv[1]
for other, what in ((sys.argv[2], "a repeated run with the same seed"), (sys.argv[3], "2 threads instead of 1")):
    if files(base) != files(other):
        print("FAIL: %s wrote a different set of files" % what); failed += 1; continue
    for f in files(base):
        ok = same(base, other, f)
        print("%s: %s gives identical %s" % ("PASS" if ok else "FAIL", what, f))
        passed += ok; failed += not ok
sys.exit(1 if failed else 0)
PY
finish
