#!/usr/bin/env bash
# Runs every example of docs/cli.md: each line starting with "$ bandlink" inside a ```sh block, in order,
# in one prepared folder holding scenario.json (tests/cli/simulate_small.json), study/ (the study
# simulated from it) and a copy of docs/examples/ (so paths written from the source root work and
# outputs stay out of the source tree). Fails when an example exits non-zero.
set -u
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
BANDLINK=$(cd "$(dirname "$BANDLINK")" && pwd)/$(basename "$BANDLINK")
export BANDLINK
doc="$BL_SOURCE_ROOT/docs/cli.md"
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
cp "$BL_SOURCE_ROOT/tests/cli/simulate_small.json" "$tmp/scenario.json"
mkdir -p "$tmp/docs"
[ -d "$BL_SOURCE_ROOT/docs/examples" ] && cp -r "$BL_SOURCE_ROOT/docs/examples" "$tmp/docs/"
"$BANDLINK" simulate "$tmp/scenario.json" --out "$tmp/study" --quiet || { echo "FAIL: preparing the folder"; exit 1; }

# Extract the examples (awk: track ```sh fences).
awk '/^```sh[[:space:]]*$/ {inblock=1; next} /^```/ {inblock=0; next} inblock && /^\$ bandlink( |$)/ {sub(/^\$ /, ""); print}' \
    "$doc" >"$tmp/examples"
n=$(wc -l <"$tmp/examples")
[ "$n" -gt 0 ] || { echo "FAIL: no examples found in docs/cli.md"; exit 1; }
fails=0
while IFS= read -r line; do
    # Replace the leading program name by the built binary; the rest is run by bash as written.
    cmd="\"\$BANDLINK\"${line#bandlink}"
    if (cd "$tmp" && eval "$cmd") >"$tmp/out" 2>&1 </dev/null; then
        echo "PASS: $line"
    else
        echo "FAIL: $line (exit $?)"; sed 's/^/    /' "$tmp/out" | tail -5
        fails=$((fails + 1))
    fi
done <"$tmp/examples"
echo "$n examples, $fails failed"
[ $fails -eq 0 ]
