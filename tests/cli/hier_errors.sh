#!/usr/bin/env bash
# Hierarchical fits, bad input: every mistake with participants' effects exits 2 with one line naming the
# key (or model/parameter/term) and the offending value, and writes nothing to --out.
# (hier_default_mode.sh: the same keys when the participants mode is left to its default.)
# Data: invented trials drawn with the engine's sampler (tests/fit_make_trials.c).
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_BUILD_ROOT:?}"

cd "$tmp" || bail "cd $tmp"
"$BL_BUILD_ROOT/tests/fit_make_trials" three.csv 40 3 5 || bail "make trials"
"$BL_BUILD_ROOT/tests/fit_make_trials" one.csv 40 1 5 || bail "make trials"
"$BL_BUILD_ROOT/tests/fit_make_trials" two.csv 40 2 5 || bail "make trials"

# study NAME FIT MODELS [TRIALS]: writes NAME.json.
study() {
  cat > "$1.json" <<JSON
{"trials": {"file": "${4:-three.csv}", "participant": "animal", "rt": "rt", "response": "correct", "upper": ["1"]},
 "fit": $2,
 "models": $3}
JSON
}
# refused NAME REGEX [FIT ARGS]: exit 2, one line on stderr matching REGEX, no results folder.
refused() {
  local name=$1 re=$2
  shift 2
  expect_exit 2 "$BANDLINK" fit "$name.json" --out "out_$name" "$@"
  expect_stderr_match "$re" "$name: the message names the culprit and its value"
  check_eval "$name: one line" "[ \$(wc -l < \"$BL_ERR\") -eq 1 ]"
  check_eval "$name: nothing written to --out" "[ ! -e out_$name ]"
}
H='{"participants": "hierarchical"}'

# `varies` naming a term the parameter does not have (a regressor that is not one of its slopes).
study unknown "$H" '[{"name": "m", "threshold": {"slopes": {"theta": []}, "varies": ["intercept", "beta"]}}]'
refused unknown 'models\[0\]\.threshold\.varies.*"beta"'
# ... a level the intercept does not have (found when the model meets the trials).
study level "$H" '[{"name": "m", "threshold": {"per": ["context"], "varies": ["intercept:dark"]}}]'
refused level "model 'm'.*threshold\.varies.*intercept:dark.*dark"
# ... the terms of a fixed parameter.
study fixed "$H" '[{"name": "m", "start": {"fixed": 0.5, "varies": ["intercept"]}}]'
refused fixed 'models\[0\]\.start\.varies.*fixed.*\["intercept"\]'
# ... the same term twice.
study twice "$H" '[{"name": "m", "drift": {"varies": ["intercept", "intercept"]}}]'
refused twice 'models\[0\]\.drift\.varies.*twice.*"intercept"'
# ... not an array.
study notarray "$H" '[{"name": "m", "drift": {"varies": "intercept"}}]'
refused notarray 'models\[0\]\.drift\.varies.*"intercept"'

# `varies` / `correlated` with participants pooled or separate.
for mode in pooled separate; do
  study "varies_$mode" "{\"participants\": \"$mode\"}" '[{"name": "m", "threshold": {"varies": ["intercept"]}}]'
  refused "varies_$mode" "models\[0\]\.threshold\.varies.*\"$mode\".*\[\"intercept\"\]"
  study "correlated_$mode" "{\"participants\": \"$mode\"}" '[{"name": "m", "correlated": true}]'
  refused "correlated_$mode" "models\[0\]\.correlated.*\"$mode\".*true"
done
study correlated_type "$H" '[{"name": "m", "correlated": "yes"}]'
refused correlated_type 'models\[0\]\.correlated.*"yes"'

# quadrature: out of range, not whole, with another mode, and > 1 with more than 3 varying terms
# (here 4: threshold per context with both levels varying, drift, nondecision).
for q in 0 21 2.5; do
  study "quadrature_$q" "{\"participants\": \"hierarchical\", \"quadrature\": $q}" '[{"name": "m"}]'
  refused "quadrature_$q" "fit\.quadrature.*$q"
done
study quadrature_pooled '{"participants": "pooled", "quadrature": 5}' '[{"name": "m"}]'
refused quadrature_pooled 'fit\.quadrature.*hierarchical.*5'
study quadrature_terms '{"participants": "hierarchical", "quadrature": 3}' \
  '[{"name": "m", "threshold": {"per": ["context"], "varies": ["intercept:rich", "intercept:lean"]}}]'
refused quadrature_terms "model 'm'.*quadrature 3.*4"

# Hierarchical with one participant.
study one "$H" '[{"name": "m"}]' one.csv
refused one "model 'm'.*hierarchical.*1"

finish
