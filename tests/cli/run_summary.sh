#!/usr/bin/env bash
# What `bandlink run` prints against what it writes: the step times in report.html equal those printed on
# the terminal (setup included, which holds the hashing of the inputs), and every command's --help lists
# each option the command accepts.
set -u
. "$(dirname "$0")/lib.sh"

"$BANDLINK" simulate "$BL_SOURCE_ROOT/tests/cli/simulate_small.json" --out "$tmp/study" --quiet || fail "simulate"
"$BANDLINK" run "$tmp/study/study.json" --out "$tmp/r" >"$tmp/out" 2>/dev/null || fail "run"
for step in setup power fits; do
    term=$(sed -n "s/^  $step *\([0-9.]*\) s .*/\1/p" "$tmp/out")
    page=$(grep -o "$step [0-9.]* s" "$tmp/r/report.html" | head -1 | sed 's/[^0-9.]//g')
    [ -n "$term" ] && [ "$term" = "$page" ] && pass "step '$step': terminal $term s = report $page s" \
        || fail "step '$step': terminal '$term' vs report '$page'"
done

# Every option a command takes is in its --help (the option lists of the source and the help text agree).
declare -A opts=(
    [run]="--out --force --threads --seed --permutations --model --timings --quiet --help"
    [fit]="--model --out --force --threads --seed --permutations --timings --quiet --help"
    [power]="--out --force --threads --timings --quiet --help"
    [check]="--threads --quiet --help"
    [simulate]="--out --seed --threads --force --quiet --help"
    [scan]="--out --force --threads --seed --permutations --timings --quiet --help"
)
for cmd in "${!opts[@]}"; do
    help=$("$BANDLINK" "$cmd" --help)
    missing=""
    for o in ${opts[$cmd]}; do grep -q -- "$o\b" <<<"$help" || missing="$missing $o"; done
    [ -z "$missing" ] && pass "$cmd --help lists all its options" || fail "$cmd --help lacks:$missing"
done
# An option a command does not take is refused (exit 2), so the lists above are complete.
"$BANDLINK" check "$tmp/study/study.json" --out x 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "unknown option '--out'" "$tmp/e" && pass "check refuses --out (exit 2)" || fail "check --out: rc $rc"
finish
