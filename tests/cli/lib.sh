# Shared helpers for the shell tests (tests/cli/*.sh). Each script starts with
#     set -u
#     . "$(dirname "$0")/lib.sh"
# and ends with `finish`. Meson runs the scripts with BANDLINK, BL_SOURCE_ROOT, BL_BUILD_ROOT and
# BL_FAULT_SHIM set (tests/meson.build); run one by hand with `bash tests/run cli_NAME`.
#
#   pass MSG                      print "PASS: script.sh:LINE: MSG" and count it
#   fail MSG                      print "FAIL: script.sh:LINE: MSG" and count it
#   check MSG CMD [ARG]...        pass MSG when CMD exits 0, else fail MSG
#   check_eval MSG 'SHELL TEXT'   the same for a compound condition, evaluated with eval
#   expect_exit CODE CMD [ARG]... run CMD (stdout to $BL_OUT, stderr to $BL_ERR); pass when it exits CODE,
#                                 else fail with the exit code and the start of its stderr; returns 0 on pass
#   expect_stderr_match REGEX [MSG]  pass when the stderr of the last expect_exit matches grep -E REGEX
#   tally CMD [ARG]...            run a program that prints its own PASS:/FAIL: lines (a python check, say):
#                                 its output is shown and its lines counted; a non-zero exit with no FAIL line
#                                 counts as one failure. A here-document after it is the program's stdin.
#   skip MSG                      the whole script is skipped: print MSG, exit 77 (meson's SKIP)
#   bail MSG                      setup failed: fail MSG, print the summary, exit 1
#   finish                        print "N passed, N failed"; exit 1 on any failure (or when nothing was checked)
#   $tmp                          a fresh temporary directory, removed when the script exits
# LINE is where the script called the helper (for a helper inside one of the script's own functions, the line
# in that function, then "from LINE" in the script body). The counts live in this shell: a pass/fail inside a
# pipeline (`cmd | while read ...; do pass ...; done`) runs in a subshell and is lost; loop with
# `while ...; done < <(cmd)` instead. A new script: tests/cli/NAME.sh plus 'NAME' in a list of tests/meson.build.

bl_passed=0
bl_failed=0
tmp=$(mktemp -d "${TMPDIR:-/tmp}/bl_test_XXXXXX") || { echo "FAIL: mktemp"; echo "0 passed, 1 failed"; exit 1; }
trap 'rm -rf "$tmp"' EXIT
BL_OUT="$tmp/.last_stdout"
BL_ERR="$tmp/.last_stderr"

# "script.sh:LINE" of the first caller outside this file (plus the outermost line when nested deeper).
bl_where() {
    local i n=${#FUNCNAME[@]} where= outer=
    for ((i = 0; i < n - 1; i++)); do
        [ "${BASH_SOURCE[i + 1]}" = "${BASH_SOURCE[0]}" ] && continue
        if [ -z "$where" ]; then
            where="${BASH_SOURCE[i + 1]##*/}:${BASH_LINENO[i]}"
        else
            outer=${BASH_LINENO[i]}
        fi
    done
    [ -n "$outer" ] && [ "$outer" != 0 ] && where="$where from $outer"
    printf '%s' "${where:-?}"
}

pass() {
    echo "PASS: $(bl_where): $*"
    bl_passed=$((bl_passed + 1))
    return 0
}

fail() {
    echo "FAIL: $(bl_where): $*"
    bl_failed=$((bl_failed + 1))
    return 1
}

check() {
    local msg=$1
    shift
    if "$@"; then pass "$msg"; else fail "$msg"; fi
}

check_eval() {
    if eval "$2"; then pass "$1"; else fail "$1"; fi
}

expect_exit() {
    local want=$1 rc
    shift
    "$@" >"$BL_OUT" 2>"$BL_ERR"
    rc=$?
    if [ "$rc" -eq "$want" ]; then
        pass "exit $rc: $*"
    else
        fail "exit $rc, want $want: $* ($(head -c 300 "$BL_ERR"))"
    fi
}

expect_stderr_match() {
    local re=$1 msg=${2:-stderr matches $1}
    if grep -Eq -- "$re" "$BL_ERR"; then pass "$msg"; else fail "$msg (stderr: $(head -c 300 "$BL_ERR"))"; fi
}

tally() {
    local line rc n_fail=0 log="$tmp/.tally_output"
    "$@" >"$log"
    rc=$?
    while IFS= read -r line || [ -n "$line" ]; do
        case "$line" in
            PASS:*) bl_passed=$((bl_passed + 1)) ;;
            FAIL:*) bl_failed=$((bl_failed + 1)); n_fail=$((n_fail + 1)) ;;
        esac
        printf '%s\n' "$line"
    done <"$log"
    [ "$rc" -ne 0 ] && [ "$n_fail" -eq 0 ] && fail "exit $rc: $*"
    return "$rc"
}

skip() {
    echo "skipped: $*"
    exit 77
}

bail() {
    fail "$*"
    finish
}

finish() {
    echo "$bl_passed passed, $bl_failed failed"
    if [ "$bl_passed" -eq 0 ] && [ "$bl_failed" -eq 0 ]; then
        echo "FAIL: ${0##*/}: no check ran"
        exit 1
    fi
    [ "$bl_failed" -eq 0 ] && exit 0
    exit 1
}
