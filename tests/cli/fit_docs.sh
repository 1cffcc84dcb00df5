#!/usr/bin/env bash
# Runs the `$ bandlink fit ...` examples of the fit section of docs/cli.md in a folder holding study/, a
# study whose regressors theta and beta are trial-table columns (invented trials from
# tests/fit_make_trials.c; the pipeline's docs test runs the same lines on a simulated study with
# recordings), and checks each writes its three files.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}" "${BL_BUILD_ROOT:?}"
mkdir -p "$tmp/study"
"$BL_BUILD_ROOT/tests/fit_make_trials" "$tmp/study/trials.csv" 200 3 8 || bail "make trials"
cat > "$tmp/study/study.json" <<'JSON'
{
  "trials": {"file": "trials.csv", "participant": "animal", "rt": "rt", "response": "correct", "upper": ["1"]},
  "models": [
    {"name": "baseline", "threshold": {"per": ["context"]}, "drift": {"per": ["difficulty"]}},
    {"name": "theta-and-beta", "extends": "baseline",
     "threshold": {"per": ["context"], "slopes": {"theta": ["context"]}},
     "drift": {"per": ["difficulty"], "slopes": {"beta": []}}}
  ],
  "output": "results"
}
JSON
awk '/<!-- section: fit / {on=1} /<!-- end section: fit / {on=0}
     on && /^```sh/ {insh=1; next} on && insh && /^```/ {insh=0; next}
     on && insh && /^\$ bandlink fit / {sub(/^\$ /, ""); print}' "$BL_SOURCE_ROOT/docs/cli.md" > "$tmp/examples"
n=$(wc -l < "$tmp/examples")
[ "$n" -ge 3 ] || bail "fewer than 3 fit examples in docs/cli.md ($n)"
while IFS= read -r line; do
    out=$(echo "$line" | sed -n 's/.*--out \([^ ]*\).*/\1/p')
    if (cd "$tmp" && eval "\"\$BANDLINK\"${line#bandlink}") > "$tmp/log" 2>&1 < /dev/null &&
       [ -s "$tmp/$out/fits.json" ] && [ -s "$tmp/$out/comparison.csv" ] && [ -s "$tmp/$out/trials.csv" ]; then
        pass "$line"
    else
        fail "$line"; tail -5 "$tmp/log"
    fi
done < "$tmp/examples"
echo "$n examples"
finish
