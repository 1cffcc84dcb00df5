#!/usr/bin/env bash
# Slow suite: every allocation, every fopen, fsync, rename, mkdir and read of `bandlink power` and `bandlink
# fit` made to fail in turn (not a sample). Each failure must give exit 1 or 2 (never a crash or a signal) with
# one "bandlink: error:" line, leave the earlier results folder byte-identical and no staging folder or
# temporary file behind -- or, when the failure cannot touch the outcome (the last fsync, after the new folder
# is in place; a call that a run with the input hashing on its own thread did not make), exit 0 with the whole
# new set: the same files as a clean run, every CSV byte-identical to it. Either the whole new set or the old. Mechanism: tests/fault/fault_inject.c (LD_PRELOAD), as in fault_injection.sh; the C
# library's, libgomp's and libsndfile's own allocations are exempt (see the shim). One thread, so the n-th
# call is the same call in every run; the runs go two at a time.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}" "${BL_FAULT_SHIM:?}"
if ldd "$BANDLINK" | grep -q libasan; then
    skip "LD_PRELOAD fault injection cannot run beside AddressSanitizer"
fi
cp -r "$BL_SOURCE_ROOT/docs/examples/power" "$tmp/study"
study="$tmp/study/study.json"

# One injected failure: prints one PASS or FAIL line. Arguments: command, kind, n.
one() {
    local cmd=$1 kind=$2 n=$3 d
    d=$(mktemp -d "$tmp/job.XXXXXX")
    cp -a "$tmp/base-$cmd" "$d/res"
    local before after rc
    before=$(cd "$d/res" && find . -type f -exec sha256sum {} + | sort)
    env LD_PRELOAD="$BL_FAULT_SHIM" BL_FAULT="$kind:$n" "$BANDLINK" "$cmd" "$study" --out "$d/res" --force --threads 1 \
        --quiet >/dev/null 2>"$d/err"
    rc=$?
    after=$(cd "$d/res" && find . -type f -exec sha256sum {} + | sort)
    local why=""
    if [ $rc -eq 0 ]; then
        # the whole new set: the files of a clean run, and its CSVs byte for byte
        [ "$(cd "$d/res" && find . -type f | sort)" = "$(cd "$tmp/base-$cmd" && find . -type f | sort)" ] ||
            why="exit 0 with a different set of files"
        for f in "$tmp/base-$cmd"/*.csv; do
            [ -z "$why" ] && ! cmp -s "$f" "$d/res/$(basename "$f")" && why="exit 0 but $(basename "$f") differs"
        done
    else
        case $rc in 1 | 2) ;; *) why="exit $rc" ;; esac
        [ -z "$why" ] && ! grep -q '^bandlink: error: ' "$d/err" && why="no 'bandlink: error:' line"
        [ -z "$why" ] && [ "$before" != "$after" ] && why="earlier results changed"
    fi
    [ -z "$why" ] && ls -a "$d" | grep -q partial && why="staging folder left"
    [ -z "$why" ] && [ -n "$(find "$d" -name '*.tmp.*' | head -1)" ] && why="temporary file left"
    if [ -z "$why" ]; then
        echo "PASS: $cmd, $kind $n fails: exit $rc, $([ $rc -eq 0 ] && echo "the whole new set" || echo "results kept")"
    else
        echo "FAIL: $cmd, $kind $n fails: $why: $(head -2 "$d/err" | tr '\n' ' ')"
    fi
    rm -rf "$d"
}
export -f one
export tmp study BANDLINK BL_FAULT_SHIM

for cmd in power fit; do
    "$BANDLINK" "$cmd" "$study" --out "$tmp/base-$cmd" --threads 1 --quiet || bail "baseline $cmd"
    counts=$(env LD_PRELOAD="$BL_FAULT_SHIM" BL_FAULT_REPORT=1 "$BANDLINK" "$cmd" "$study" --out "$tmp/base-$cmd" \
        --force --threads 1 --quiet 2>&1 >/dev/null)
    for kind in malloc fopen fsync rename mkdir read; do
        total=$(echo "$counts" | sed -n "s/^bl_fault $kind //p")
        [ -n "$total" ] || { fail "$cmd: no count of $kind calls"; continue; }
        [ "$total" -gt 0 ] || continue
        pass "$cmd makes $total $kind calls; each is made to fail in turn"
        tally bash -c "seq 1 $total | xargs -P 2 -I{} bash -c 'one $cmd $kind {}'"
    done
done
finish
