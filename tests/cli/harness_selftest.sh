#!/usr/bin/env bash
# The test tools themselves: tests/harness.h (through tests/harness_demo.c, whose 'failing' case fails on purpose)
# and tests/cli/lib.sh (sourced in child shells whose output and exit status are inspected).
# Usage: harness_selftest.sh HARNESS_DEMO_PROGRAM
set -u
. "$(dirname "$0")/lib.sh"
demo="$1"
lib="$(dirname "$0")/lib.sh"

# harness.h: --list, --case, patterns, unknown names, the failure report.
expect_exit 0 "$demo" --list
check "--list prints the two case names" diff -q "$BL_OUT" <(printf 'passing\nfailing\n')
expect_exit 0 "$demo" --case passing
check_eval "--case passing: 5 checks, 0 failed" "tail -1 '$BL_OUT' | grep -qx '5 checks passed, 0 failed'"
expect_exit 1 "$demo"
check_eval "all cases: 5 passed, 5 failed, the failing case named" \
    "grep -qx '5 checks passed, 5 failed' '$BL_OUT' && grep -q '^failed case: failing (rerun alone: .* --case failing)' '$BL_OUT'"
check_eval "a failing check_rel prints file:line, the expression, the values and the tolerance" \
    "grep -q '^FAIL: a relative check that fails (got 0.33333333333333331, want 0.29999999999999999, rel 0.111, tol 0.001)' '$BL_OUT' &&
     grep -Eq '^    at .*harness_demo.c:[0-9]+: check_rel\(third, 0.3, 1e-3\)$' '$BL_OUT'"
check_eval "a failing check_abs, check_int, check_str, check_true each name their expression" \
    "grep -q 'check_abs(third, 0.3, 1e-3)' '$BL_OUT' && grep -q 'check_int(7 \* 6, 41)' '$BL_OUT' &&
     grep -q 'check_str(\"band\", \"bands\")' '$BL_OUT' && grep -q 'check_true(third > 1)' '$BL_OUT'"
check_eval "== case headers" "[ \$(grep -c '^== case ' '$BL_OUT') -eq 2 ]"
expect_exit 1 "$demo" --case 'fail*'
check_eval "--case takes a pattern" "grep -q '^== case failing' '$BL_OUT' && ! grep -q '^== case passing' '$BL_OUT'"
expect_exit 2 "$demo" --case nope
expect_stderr_match "no case matches 'nope'" "an unknown case is a usage error naming it"
expect_exit 2 "$demo" --bogus
expect_stderr_match "unknown argument '--bogus'" "an unknown option is a usage error naming it"

# lib.sh in a child shell: counts, script:line, summary, exit status, temp dir removal.
cat >"$tmp/child.sh" <<CHILD
set -u
. "$lib"
pass "first"
fail "second"
check "true passes" true
check "false fails" false
echo "\$tmp" >"$tmp/child_tmp"
finish
CHILD
expect_exit 1 bash "$tmp/child.sh"
check_eval "pass/fail/check lines carry script:line" \
    "grep -qx 'PASS: child.sh:3: first' '$BL_OUT' && grep -qx 'FAIL: child.sh:4: second' '$BL_OUT' &&
     grep -qx 'FAIL: child.sh:6: false fails' '$BL_OUT'"
check_eval "finish prints the tally" "tail -1 '$BL_OUT' | grep -qx '2 passed, 2 failed'"
check_eval "the child's temporary folder is removed at exit" "[ -s '$tmp/child_tmp' ] && [ ! -e \"\$(cat '$tmp/child_tmp')\" ]"

printf 'set -u\n. "%s"\npass ok\nfinish\n' "$lib" >"$tmp/ok.sh"
expect_exit 0 bash "$tmp/ok.sh"
printf 'set -u\n. "%s"\nfinish\n' "$lib" >"$tmp/none.sh"
expect_exit 1 bash "$tmp/none.sh"
check_eval "a script that checked nothing fails" "grep -q 'no check ran' '$BL_OUT'"
printf 'set -u\n. "%s"\nskip "no tool"\n' "$lib" >"$tmp/skip.sh"
expect_exit 77 bash "$tmp/skip.sh"
printf 'set -u\n. "%s"\nbail "setup broke"\npass never\n' "$lib" >"$tmp/bail.sh"
expect_exit 1 bash "$tmp/bail.sh"
check_eval "bail stops the script after one failure" \
    "grep -qx 'FAIL: bail.sh:3: setup broke' '$BL_OUT' && ! grep -q never '$BL_OUT'"
printf 'set -u\n. "%s"\ntally printf "PASS: a\\\\nFAIL: b\\\\nPASS: c\\\\n"\ntally false\nfinish\n' "$lib" >"$tmp/tally.sh"
expect_exit 1 bash "$tmp/tally.sh"
check_eval "tally counts the PASS/FAIL lines of a program and a silent non-zero exit" \
    "tail -1 '$BL_OUT' | grep -qx '2 passed, 2 failed' && grep -q 'FAIL: tally.sh:4: exit 1: false' '$BL_OUT'"
printf 'set -u\n. "%s"\nexpect_exit 3 bash -c "echo oops >&2; exit 3"\nexpect_stderr_match "^oops$" "said oops"\nexpect_exit 0 bash -c "exit 4"\nfinish\n' "$lib" >"$tmp/exit.sh"
expect_exit 1 bash "$tmp/exit.sh"
check_eval "expect_exit and expect_stderr_match" \
    "grep -q '^PASS: exit.sh:3: exit 3: bash' '$BL_OUT' && grep -qx 'PASS: exit.sh:4: said oops' '$BL_OUT' &&
     grep -q '^FAIL: exit.sh:5: exit 4, want 0: bash' '$BL_OUT'"
finish
