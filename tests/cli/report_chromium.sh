#!/usr/bin/env bash
# report.html renders in a real browser engine: headless Chromium loads the page offline, its DOM
# holds the five inline figures and the caution, and a screenshot is produced.
# Usage: report_chromium.sh REPORT_SAMPLE_PROGRAM. Skipped (77) when /usr/bin/chromium is absent.
set -u
. "$(dirname "$0")/lib.sh"
chromium=/usr/bin/chromium
[ -x "$chromium" ] || skip "chromium not installed"
sample="$1"

"$sample" "$tmp/out" || bail "sample program"
flags=(--headless --no-sandbox --disable-gpu --disable-quic --no-first-run --disable-background-networking
       --disable-component-update --disable-sync --hide-scrollbars)

timeout 120 "$chromium" "${flags[@]}" --user-data-dir="$tmp/profile1" --dump-dom "file://$tmp/out/report.html" \
    >"$tmp/dom.html" 2>"$tmp/dom.err"
[ -s "$tmp/dom.html" ] && pass "chromium dumped the DOM" || fail "chromium produced no DOM ($(tail -3 "$tmp/dom.err"))"
n=$(grep -o '<svg xmlns' "$tmp/dom.html" | wc -l)
[ "$n" -eq 5 ] && pass "DOM has 5 inline svg figures" || fail "DOM has $n inline svg figures"
grep -q 'Research use only; not a medical device.' "$tmp/dom.html" && pass "caution in the DOM" || fail "caution missing"
grep -q '<h2 id="comparison">Model comparison</h2>' "$tmp/dom.html" && pass "sections in the DOM" || fail "sections missing"
! grep -q '<parsererror' "$tmp/dom.html" && pass "no parser error" || fail "parser error in the DOM"

timeout 120 "$chromium" "${flags[@]}" --user-data-dir="$tmp/profile2" --window-size=1250,4000 \
    --screenshot="$tmp/shot.png" "file://$tmp/out/report.html" >/dev/null 2>"$tmp/shot.err"
if [ -s "$tmp/shot.png" ] && [ "$(head -c 8 "$tmp/shot.png" | od -An -tx1 | tr -d ' \n')" = "89504e470d0a1a0a" ]; then
    pass "screenshot is a PNG"
    size=$(stat -c %s "$tmp/shot.png")
    # A blank 1250x4000 page compresses to a few kB; text, tables and five figures give far more.
    [ "$size" -gt 100000 ] && pass "screenshot has content ($size bytes)" || fail "screenshot nearly empty ($size bytes)"
else
    fail "no screenshot ($(tail -3 "$tmp/shot.err"))"
fi
finish
