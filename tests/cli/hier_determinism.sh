#!/usr/bin/env bash
# Hierarchical fits are the same bytes whatever the thread count: participants are evaluated in parallel
# and summed in participant order (DEVELOPERS.md, determinism). fits.json may differ only in the
# provenance's clock times, the recorded thread count and the stage timings (looked at when written:
# "started", "finished", "threads", "stage_seconds"; the fits' own seconds are not written); trials.csv
# and comparison.csv must be identical. Laplace (varying intercepts; a correlated intercept and slope)
# and adaptive Gauss-Hermite (3 nodes per dimension, 3 varying intercepts).
# Data: invented trials drawn with the engine's sampler (tests/fit_make_trials.c).
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_BUILD_ROOT:?}"

cd "$tmp" || bail "cd $tmp"
"$BL_BUILD_ROOT/tests/fit_make_trials" trials.csv 100 4 3 || bail "make trials"

study() {
  cat <<JSON
{"trials": {"file": "trials.csv", "participant": "animal", "rt": "rt", "response": "correct", "upper": ["1"]},
 "fit": {"participants": "hierarchical", "quadrature": $1},
 "models": [
   {"name": "intercepts", "drift": {"per": ["difficulty"]}},
   {"name": "slope", "threshold": {"slopes": {"theta": []}, "varies": ["intercept", "theta"]},
    "drift": {"per": ["difficulty"], "varies": []}, "correlated": true}
 ]}
JSON
}
study 1 > laplace.json
study 3 > gh3.json

# The lines of two fits.json that differ, with the key of each ("started", ...), one per line, sorted.
differing_keys() {
  diff <(cat "$1") <(cat "$2") | sed -n 's/^[<>][[:space:]]*"\([a-z_]*\)":.*/\1/p' | sort -u
}
allowed=$'finished\nfits\npower\nreport\nsetup\nstarted\nthreads\ngoodness\nfigures'

compare() { # NAME STUDY [ARGS]
  local name=$1 file=$2
  shift 2
  expect_exit 0 "$BANDLINK" fit "$file" --out "${name}_1" --threads 1 --quiet "$@"
  expect_exit 0 "$BANDLINK" fit "$file" --out "${name}_2" --threads 2 --quiet "$@"
  [ -s "${name}_1/fits.json" ] && [ -s "${name}_2/fits.json" ] || { fail "$name: no fits.json"; return; }
  check_eval "$name: fits.json is hierarchical" "grep -q '\"mode\":[[:space:]]*\"hierarchical\"' ${name}_1/fits.json"
  local keys extra
  keys=$(differing_keys "${name}_1/fits.json" "${name}_2/fits.json")
  extra=$(comm -23 <(printf '%s\n' "$keys") <(printf '%s\n' "$allowed" | sort -u) | tr '\n' ' ')
  check_eval "$name: fits.json differs only in provenance times, threads, stage timings (differing: $(echo $keys))" \
    "[ -z \"$extra\" ]"
  check_eval "$name: the threads line is among the differences (the comparison sees the files)" \
    "printf '%s\n' \"$keys\" | grep -qx threads"
  # The same, structurally: with those fields removed the two documents are equal (python3 json).
  if [ -x /usr/bin/python3 ]; then
    check_eval "$name: fits.json equal as JSON without provenance times, threads and stage timings" "/usr/bin/python3 - ${name}_1/fits.json ${name}_2/fits.json <<'PY'
import json, sys
docs = [json.load(open(p)) for p in sys.argv[1:3]]
for d in docs:
    for k in ('started', 'finished', 'threads', 'stage_seconds'):
        d['provenance'].pop(k)
assert docs[0] == docs[1]
PY"
  fi
  check "$name: trials.csv identical" cmp -s "${name}_1/trials.csv" "${name}_2/trials.csv"
  check "$name: comparison.csv identical" cmp -s "${name}_1/comparison.csv" "${name}_2/comparison.csv"
}
compare laplace laplace.json
compare gh3 gh3.json --model intercepts
finish
