#!/usr/bin/env bash
# An interrupted run (SIGKILL mid-way through a --force replacement) leaves the earlier results exactly
# as they were; the next run cleans up the leftover staging folder.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"

"$BANDLINK" simulate "$BL_SOURCE_ROOT/tests/cli/simulate_small.json" --out "$tmp/study" --quiet || bail "simulate"
"$BANDLINK" run "$tmp/study/study.json" --out "$tmp/res" --quiet || bail "first run"
before=$(cd "$tmp/res" && find . -type f -exec sha256sum {} + | sort)

# A run replacing the results, killed once its staging folder holds power.csv: the folder is begun only when
# every computation is done, so the kill lands while the outputs are being written (goodness of fit, figures,
# report). Polled every 10 ms; a few attempts, as the writing takes well under a second.
killed=0
for attempt in 1 2 3 4 5 6; do
    "$BANDLINK" run "$tmp/study/study.json" --out "$tmp/res" --force --threads 1 --quiet &
    pid=$!
    for _ in $(seq 1 6000); do
        if ls -a "$tmp" | grep -q "^\.res\.partial-$pid-" && [ -e "$(ls -d "$tmp"/.res.partial-$pid-*)/power.csv" ]; then
            kill -9 $pid 2>/dev/null && killed=1
            break
        fi
        kill -0 $pid 2>/dev/null || break
        sleep 0.01
    done
    wait $pid 2>/dev/null
    [ $killed -eq 1 ] && break
done
[ $killed -eq 1 ] && pass "run killed (SIGKILL) after it had written power.csv into its staging folder" \
    || fail "could not catch the run mid-way"
after=$(cd "$tmp/res" && find . -type f -exec sha256sum {} + | sort)
[ "$before" = "$after" ] && pass "earlier results intact after the kill" || fail "earlier results changed"
ls -a "$tmp" | grep -q "^\.res\.partial-" && pass "the killed run's staging folder is hidden beside the results" \
    || fail "no staging folder seen"

# The next run removes the stale staging folder (its process is gone) and completes.
"$BANDLINK" run "$tmp/study/study.json" --out "$tmp/res" --force --quiet && pass "next run succeeds" || fail "next run"
ls -a "$tmp" | grep -q "^\.res\.partial-" && fail "stale staging folder not cleaned up" || pass "stale staging folder removed"
finish
