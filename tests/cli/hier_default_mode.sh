#!/usr/bin/env bash
# Participants' effects asked for (`varies`, `correlated`, `quadrature` > 1) in a study that leaves
# fit.participants to its default, which is pooled with fewer than 3 participants: an error naming the
# key, a hierarchical fit, or at least a warning naming the key are all acceptable; a pooled fit that
# drops the key without a word is not.
# Data: invented trials drawn with the engine's sampler (tests/fit_make_trials.c).
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_BUILD_ROOT:?}"

cd "$tmp" || bail "cd $tmp"
"$BL_BUILD_ROOT/tests/fit_make_trials" one.csv 40 1 5 || bail "make trials"
"$BL_BUILD_ROOT/tests/fit_make_trials" two.csv 40 2 5 || bail "make trials"

# study NAME FIT MODELS TRIALS: writes NAME.json.
study() {
  cat > "$1.json" <<JSON
{"trials": {"file": "$4", "participant": "animal", "rt": "rt", "response": "correct", "upper": ["1"]},
 "fit": $2,
 "models": $3}
JSON
}
not_dropped() {
  local name=$1 key=$2
  "$BANDLINK" fit "$name.json" --out "out_$name" > "$name.out" 2> "$name.err"
  local code=$? mode
  mode=$(grep -o '"mode":[[:space:]]*"[a-z]*"' "out_$name/fits.json" 2>/dev/null | head -1 | sed 's/.*"\([a-z]*\)"$/\1/')
  if [ $code -eq 2 ] && grep -q "$key" "$name.err"; then pass "$name: refused, naming $key"
  elif [ $code -eq 0 ] && [ "$mode" = hierarchical ]; then pass "$name: fitted hierarchically"
  elif [ $code -eq 0 ] && grep -qi "warning.*$key" "$name.err"; then pass "$name: fitted pooled with a warning naming $key"
  else fail "$name: $key silently dropped (exit $code, mode ${mode:-none}; stderr: $(head -c 200 "$name.err"))"
  fi
}
study default_varies '{}' '[{"name": "m", "threshold": {"varies": ["intercept"]}}]' two.csv
not_dropped default_varies varies
study default_correlated '{}' '[{"name": "m", "correlated": true}]' two.csv
not_dropped default_correlated correlated
study default_quadrature '{"quadrature": 5}' '[{"name": "m"}]' one.csv
not_dropped default_quadrature quadrature
finish
