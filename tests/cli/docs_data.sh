#!/usr/bin/env bash
# Runs the `$ bandlink ...` example lines of the power and check sections of docs/cli.md from a scratch
# folder where docs/ points at the source tree's docs/, and compares their output with the lines shown
# under them (and the check summary block with the real summary).
set -u
. "$(dirname "$0")/lib.sh"
ln -s "$BL_SOURCE_ROOT/docs" "$tmp/docs"
doc="$BL_SOURCE_ROOT/docs/cli.md"
n=0
for sec in power check; do
    awk -v sec="$sec" '
        $0 ~ "<!-- section: " sec " " {on=1} $0 ~ "<!-- end section: " sec " " {on=0}
        on && /^```sh/ {insh=1; next} on && insh && /^```/ {insh=0; print "@@END"; next}
        on && insh {print}' "$doc" > "$tmp/$sec.lines"
    cmd=""; expect=""
    run_one() {
        [ -z "$cmd" ] && return
        n=$((n + 1))
        local got rc
        got=$(cd "$tmp" && eval "\"\$BANDLINK\" ${cmd#bandlink }" 2>"$tmp/err"); rc=$?
        if [ $rc -ne 0 ]; then fail "docs example '$cmd' exit $rc: $(cat "$tmp/err")"
        elif [ -n "$expect" ] && [ "$got" != "$expect" ]; then fail "docs example '$cmd' printed '$got', docs show '$expect'"
        else pass "docs example '$cmd'"; fi
    }
    while IFS= read -r line; do
        case "$line" in
            '$ '*) run_one; cmd=${line#\$ }; expect="" ;;
            '@@END') run_one; cmd=""; expect="" ;;
            *) expect=${expect:+$expect$'\n'}$line ;;
        esac
    done < "$tmp/$sec.lines"
done
# the check summary shown in the docs is what check prints
want=$(sed -n '/<!-- section: check/,/<!-- end section: check/p' "$doc" | sed -n '/^study        /,/^warnings/p')
got=$(cd "$tmp" && "$BANDLINK" check docs/examples/power/study.json 2>/dev/null)
[ -n "$want" ] && [ "$want" = "$got" ] && pass "check summary in docs/cli.md matches" || fail "check summary in docs differs: $got"
[ $n -ge 3 ] && pass "$n docs examples run" || fail "only $n docs examples found"
finish
