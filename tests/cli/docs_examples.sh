#!/usr/bin/env bash
# Runs every example of docs/cli.md: each line starting with "$ bandlink" inside a ```sh block, in order,
# in one prepared folder holding scenario.json (tests/cli/simulate_small.json), study/ (the study
# simulated from it) and a copy of docs/examples/ (so paths written from the source root work and
# outputs stay out of the source tree). Fails when an example exits non-zero.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
BANDLINK=$(cd "$(dirname "$BANDLINK")" && pwd)/$(basename "$BANDLINK")
export BANDLINK
doc="$BL_SOURCE_ROOT/docs/cli.md"
cp "$BL_SOURCE_ROOT/tests/cli/simulate_small.json" "$tmp/scenario.json"
mkdir -p "$tmp/docs"
[ -d "$BL_SOURCE_ROOT/docs/examples" ] && cp -r "$BL_SOURCE_ROOT/docs/examples" "$tmp/docs/"
"$BANDLINK" simulate "$tmp/scenario.json" --out "$tmp/study" --quiet || bail "preparing the folder"

# Extract the examples (awk: track ```sh fences).
awk '/^```sh[[:space:]]*$/ {inblock=1; next} /^```/ {inblock=0; next} inblock && /^\$ bandlink( |$)/ {sub(/^\$ /, ""); print}' \
    "$doc" >"$tmp/examples"
n=$(wc -l <"$tmp/examples")
[ "$n" -gt 0 ] || bail "no examples found in docs/cli.md"
while IFS= read -r line; do
    # Replace the leading program name by the built binary; the rest is run by bash as written.
    cmd="\"\$BANDLINK\"${line#bandlink}"
    if (cd "$tmp" && eval "$cmd") >"$tmp/out" 2>&1 </dev/null; then
        pass "$line"
    else
        fail "$line (exit $?)"; sed 's/^/    /' "$tmp/out" | tail -5
    fi
done <"$tmp/examples"
echo "$n examples"
finish
