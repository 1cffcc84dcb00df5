#!/usr/bin/env bash
# Fault injection: a failing disk, allocation, read or rename gives a clear one-line error and a non-zero
# exit (never a crash), leaves no partial file and keeps the earlier results intact.
# Mechanism: tests/fault/fault_inject.c loaded with LD_PRELOAD (the idea of jq's src/inject_errors.c),
# and RLIMIT_FSIZE (`ulimit -f`, POSIX setrlimit) for a disk that fills up mid-write.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}" "${BL_FAULT_SHIM:?}"
if ldd "$BANDLINK" | grep -q libasan; then
    skip "LD_PRELOAD fault injection cannot run beside AddressSanitizer"
fi

work=$tmp
cp -r "$BL_SOURCE_ROOT/docs/examples/power" "$work/study"
study="$work/study/study.json"
out="$work/out"

"$BANDLINK" power "$study" --out "$out" --quiet >/dev/null 2>&1 || fail "baseline power run"
[ -f "$out/power.csv" ] && pass "baseline power.csv written" || fail "baseline power.csv missing"
before=$(sha256sum "$out/power.csv" | cut -d' ' -f1)
input_sums=$(cd "$work/study" && find . -type f -not -path './results-run/*' | sort | xargs sha256sum)

# expect_failure NAME EXPECTED-EXIT-CODES COMMAND...: non-zero exit in the allowed set (never a signal),
# one "bandlink: error:" line, earlier power.csv unchanged, no temporary file left behind.
expect_failure() {
    local name="$1" codes="$2"
    shift 2
    local err="$work/stderr"
    "$@" >/dev/null 2>"$err"
    local rc=$?
    if [[ " $codes " == *" $rc "* ]]; then pass "$name: exit $rc"; else fail "$name: exit $rc (want one of $codes): $(head -3 "$err")"; fi
    if grep -q '^bandlink: error: ' "$err"; then pass "$name: message '$(grep -m1 '^bandlink: error: ' "$err" | cut -c1-110)'"; else fail "$name: no 'bandlink: error:' line: $(head -3 "$err")"; fi
    local now
    now=$(sha256sum "$out/power.csv" 2>/dev/null | cut -d' ' -f1)
    [ "$now" = "$before" ] && pass "$name: earlier power.csv intact" || fail "$name: earlier power.csv changed or lost"
    local left
    left=$(find "$work" -name '*.tmp.*' | head -3)
    [ -z "$left" ] && pass "$name: no temporary file left" || { fail "$name: temporary files left: $left"; find "$work" -name '*.tmp.*' -delete; }
}

inject() { env LD_PRELOAD="$BL_FAULT_SHIM" "$@"; }

expect_failure "rename fails" "1" inject BL_FAULT=rename:1 "$BANDLINK" power "$study" --out "$out" --force --quiet
expect_failure "fsync fails" "1" inject BL_FAULT=fsync:1 "$BANDLINK" power "$study" --out "$out" --force --quiet
expect_failure "disk full (RLIMIT_FSIZE 1 KiB)" "1" bash -c 'trap "" XFSZ; ulimit -f 1; exec "$@"' _ "$BANDLINK" power "$study" --out "$out" --force --quiet
expect_failure "recording read fails" "1 2" inject BL_FAULT=read:3 BL_FAULT_STICKY=1 "$BANDLINK" power "$study" --out "$out" --force --quiet
expect_failure "first fopen fails" "1 2" inject BL_FAULT=fopen:1 "$BANDLINK" power "$study" --out "$out" --force --quiet

# Allocation failures at points spread over a whole run.
total=$(inject BL_FAULT_REPORT=1 "$BANDLINK" power "$study" --out "$work/count" --quiet 2>&1 >/dev/null | sed -n 's/^bl_fault malloc //p')
if [ -n "$total" ] && [ "$total" -gt 10 ]; then
    pass "a power run makes $total allocations"
    for k in $(seq 1 25); do
        n=$(( (total * k) / 26 + 1 ))
        expect_failure "allocation $n of $total fails" "1" inject BL_FAULT=malloc:$n "$BANDLINK" power "$study" --out "$out" --force --quiet
    done
else
    fail "could not count allocations ($total)"
fi

# The whole pipeline: a failure at any point keeps the earlier results folder exactly as it was and
# leaves no staging folder behind.
res="$work/study/results-run"
"$BANDLINK" run "$study" --out "$res" --quiet >/dev/null 2>&1 || fail "baseline run"
res_sums() { (cd "$res" && find . -type f | sort | xargs sha256sum); }
res_before=$(res_sums)
expect_run_failure() {
    local name="$1"
    shift
    local err="$work/stderr"
    "$@" >/dev/null 2>"$err"
    local rc=$?
    [ "$rc" -eq 1 ] && pass "run, $name: exit 1" || fail "run, $name: exit $rc (want 1): $(head -3 "$err")"
    grep -q '^bandlink: error: ' "$err" && pass "run, $name: one-line error" || fail "run, $name: no 'bandlink: error:' line: $(head -3 "$err")"
    [ "$(res_sums)" = "$res_before" ] && pass "run, $name: earlier results folder intact" || fail "run, $name: earlier results changed"
    local left
    left=$(find "$work/study" -maxdepth 1 -name '.*partial*' | head -3)
    [ -z "$left" ] && pass "run, $name: no staging folder left" || { fail "run, $name: staging left: $left"; rm -rf "$work"/study/.*partial*; }
}
# Count the calls of a run that replaces an existing folder (the path every case below takes).
"$BANDLINK" run "$study" --out "$work/count-run" --quiet >/dev/null 2>&1
counts=$(inject BL_FAULT_REPORT=1 "$BANDLINK" run "$study" --out "$work/count-run" --force --quiet 2>&1 >/dev/null)
renames=$(echo "$counts" | sed -n 's/^bl_fault rename //p')
run_mallocs=$(echo "$counts" | sed -n 's/^bl_fault malloc //p')
for k in 1 $(( (renames + 1) / 2 )) "$renames"; do
    expect_run_failure "rename $k of $renames fails" inject BL_FAULT=rename:$k "$BANDLINK" run "$study" --out "$res" --force --quiet
done
expect_run_failure "fsync fails" inject BL_FAULT=fsync:2 "$BANDLINK" run "$study" --out "$res" --force --quiet
expect_run_failure "disk full (RLIMIT_FSIZE 4 KiB)" bash -c 'trap "" XFSZ; ulimit -f 4; exec "$@"' _ "$BANDLINK" run "$study" --out "$res" --force --quiet
for k in $(seq 1 12); do
    n=$(( (run_mallocs * k) / 13 + 1 ))
    expect_run_failure "allocation $n of $run_mallocs fails" inject BL_FAULT=malloc:$n "$BANDLINK" run "$study" --out "$res" --force --quiet
done

after_inputs=$(cd "$work/study" && find . -type f -not -path './results-run/*' | sort | xargs sha256sum)
[ "$after_inputs" = "$input_sums" ] && pass "inputs never modified" || fail "an input file changed"
finish
