#!/usr/bin/env bash
# bandlink fit from the command line: the three result files, their shape, reproducibility (same
# seed -> same bytes, whatever the thread count), --model, --permutations, separate mode, stimulus
# coding, and bad usage / bad models exiting 2 with a message naming model, parameter and level.
# Data: invented trials drawn with the engine's sampler (tests/fit_make_trials.c).
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_BUILD_ROOT:?}"
# fits.json equal apart from the provenance's clock times and recorded thread count.
same_fits() { diff -q <(grep -Ev '"(started|finished|threads|setup|power|fits|goodness|figures|report)":' "$1") <(grep -Ev '"(started|finished|threads|setup|power|fits|goodness|figures|report)":' "$2") >/dev/null; }

cd "$tmp" || bail "cd $tmp"
"$BL_BUILD_ROOT/tests/fit_make_trials" trials.csv 250 3 11 || bail "make trials"

cat > study.json <<'EOF'
{
  "trials": {"file": "trials.csv", "participant": "animal", "rt": "rt", "response": "correct", "upper": ["1"],
             "keep": {"rt_min": 0.15, "rt_max": 5.0}},
  "fit": {"participants": "pooled", "starts": 2},
  "models": [
    {"name": "baseline", "threshold": {"per": ["context"]}, "drift": {"per": ["difficulty"]}},
    {"name": "theta-threshold", "extends": "baseline",
     "threshold": {"per": ["context"], "slopes": {"theta": ["context"]}}},
    {"name": "drift-by-animal", "extends": "baseline", "drift": {"per": ["animal"]}}
  ],
  "output": "results"
}
EOF

# 1. A full fit.
"$BANDLINK" fit study.json --threads 2 > out.txt 2> err.txt
code=$?
check_eval "fit exits 0" "[ $code -eq 0 ]"
check_eval "three result files" "[ -s results/fits.json ] && [ -s results/comparison.csv ] && [ -s results/trials.csv ]"
check_eval "comparison.csv: header + 3 models" "[ \$(wc -l < results/comparison.csv) -eq 4 ]"
check_eval "comparison.csv header" \
  "head -1 results/comparison.csv | grep -qx 'name,parameters,trials,log_likelihood,aic,bic,delta_aic,delta_bic,aic_weight,lrt_against,lrt_nested,lrt_statistic,lrt_df,lrt_p'"
check_eval "theta-threshold is nested in baseline, df 2" "grep -q '^theta-threshold,8,750,.*,baseline,yes,[0-9.e+-]*,2,' results/comparison.csv"
check_eval "drift-by-animal is not nested" "grep -q '^drift-by-animal,.*,baseline,not nested,NA,NA,NA$' results/comparison.csv"
check_eval "trials.csv: header + 3 x 750 rows" "[ \$(wc -l < results/trials.csv) -eq 2251 ]"
check_eval "trials.csv header" \
  "head -1 results/trials.csv | grep -qx 'model,participant,trial,threshold,drift,nondecision,start,p_upper,mean_rt,log_likelihood,context,difficulty,theta'"
check_eval "summary names the models" "grep -q 'theta-threshold' out.txt && grep -Eq '^  theta-threshold .* vs baseline: chi2' out.txt"
check_eval "fits.json has coefficients with CIs" "grep -q '\"ci_low\"' results/fits.json && grep -q '\"term\":[[:space:]]*\"theta\"' results/fits.json"
if [ -x /usr/bin/python3 ]; then
  check_eval "fits.json is valid JSON with the contract keys" "/usr/bin/python3 - <<'PY'
import json
d = json.load(open('results/fits.json'))
m = d['models'][1]
keys = {'name','log_likelihood','parameters','trials','aic','bic','converged','coefficients'}
assert keys <= set(m), m.keys()
c = m['coefficients'][2]
assert set(c) == {'parameter','term','level','estimate','se','ci_low','ci_high','z','p'}, c.keys()
assert c['term'] == 'theta' and c['level'] == 'rich' and c['ci_low'] < c['estimate'] < c['ci_high']
assert m['converged'] is True and 'provenance' in d
PY"
fi

# 2. Same seed -> same bytes, with a different thread count; existing files need --force.
cp results/fits.json fits1.json
cp results/trials.csv trials1.csv
"$BANDLINK" fit study.json --threads 1 > /dev/null 2> err2.txt
code=$?
check_eval "existing results: exit 2 without --force" "[ $code -eq 2 ] && grep -q 'exists' err2.txt && grep -q -- '--force' err2.txt"
"$BANDLINK" fit study.json --threads 1 --force --quiet > quiet.txt 2>&1
check_eval "--force replaces; --quiet prints nothing" "[ $? -eq 0 ] && [ ! -s quiet.txt ]"
check_eval "1 thread vs 2 threads: identical fits.json (apart from times and thread count)" "same_fits fits1.json results/fits.json"
check_eval "1 thread vs 2 threads: identical trials.csv" "cmp -s trials1.csv results/trials.csv"

# 3. --model, --out, --permutations.
"$BANDLINK" fit study.json --model theta-threshold --out only --permutations 9 --seed 4 --quiet
check_eval "--model: one model fitted" "[ \$(wc -l < only/comparison.csv) -eq 2 ]"
check_eval "--model without its base: lrt 'not fitted'" "grep -q ',baseline,not fitted,NA,NA,NA$' only/comparison.csv"
check_eval "permutation test in fits.json" "grep -q '\"permutation_tests\"' only/fits.json && grep -q '\"permutations\":[[:space:]]*9' only/fits.json"
"$BANDLINK" fit study.json --model theta-threshold --out only2 --permutations 9 --seed 4 --quiet
check_eval "permutations reproducible for a seed" "same_fits only/fits.json only2/fits.json"

# 4. Bad usage.
"$BANDLINK" fit study.json --model nosuch --out bad1 > /dev/null 2> e.txt
check_eval "--model unknown: exit 2 naming it" "[ $? -eq 2 ] && grep -q \"no model 'nosuch'\" e.txt"
"$BANDLINK" fit study.json --threads x > /dev/null 2> e.txt
check_eval "--threads x: exit 2" "[ $? -eq 2 ] && grep -q -- '--threads' e.txt"
"$BANDLINK" fit --bogus study.json > /dev/null 2> e.txt
check_eval "unknown option: exit 2" "[ $? -eq 2 ] && grep -q -- '--bogus' e.txt"
"$BANDLINK" fit study.json --model baseline --model baseline --out twice 2> e.txt
check_eval "a model named twice: exit 2" "[ $? -eq 2 ] && grep -q 'given twice' e.txt && [ ! -e twice ]"
"$BANDLINK" fit study.json --out --quiet 2> e.txt
check_eval "an option where a value belongs: exit 2" "[ $? -eq 2 ] && grep -q 'needs a value' e.txt && [ ! -e ./--quiet ]"
"$BANDLINK" fit > /dev/null 2> e.txt
check_eval "missing study: exit 2" "[ $? -eq 2 ]"
"$BANDLINK" fit --help > h.txt
check_eval "--help prints usage to stdout" "[ $? -eq 0 ] && grep -q 'usage: bandlink fit' h.txt"

# 5. Bad models: exit 2, message naming model, parameter and level or name.
bad_model() { # name, models JSON
  sed "s|\"models\": \[|\"models\": [$2,|" study.json > "bad_$1.json"
}
bad_model unknown '{"name": "typo", "threshold": {"slopes": {"thetaa": []}}}'
"$BANDLINK" fit bad_unknown.json --model typo --out b > /dev/null 2> e.txt
code=$?
check_eval "unknown regressor: exit 2" "[ $code -eq 2 ]"
check_eval "unknown regressor: names model, parameter, regressor" \
  "grep -q \"model 'typo'\" e.txt && grep -q \"parameter 'threshold'\" e.txt && grep -q \"'thetaa'\" e.txt"
# "session" is constant within each animal, so a per-animal slope on it duplicates the intercepts.
awk -F, 'BEGIN{OFS=","} NR==1{print $0,"session"; next} {s=substr($1,4); print $0,s}' trials.csv > t2.csv
sed 's/"trials.csv"/"t2.csv"/' study.json > s2.json
sed "s|\"models\": \[|\"models\": [{\"name\": \"session-drift\", \"drift\": {\"per\": [\"animal\"], \"slopes\": {\"session\": [\"animal\"]}}},|" s2.json > bad_rank.json
"$BANDLINK" fit bad_rank.json --model session-drift --out b > /dev/null 2> e.txt
code=$?
check_eval "rank-deficient design: exit 2" "[ $code -eq 2 ]"
check_eval "rank-deficient design: names model, parameter and level" \
  "grep -q \"model 'session-drift'\" e.txt && grep -q \"parameter 'drift'\" e.txt && grep -q \"slope 'session' at level 'rat\" e.txt && grep -q 'rank-deficient' e.txt"
bad_model extends '{"name": "orphan", "extends": "nobody"}'
"$BANDLINK" fit bad_extends.json --out b > /dev/null 2> e.txt
check_eval "unknown extends: exit 2 naming it" "[ $? -eq 2 ] && grep -q 'nobody' e.txt && grep -q 'orphan' e.txt"
bad_model column '{"name": "colless", "drift": {"per": ["reward"]}}'
"$BANDLINK" fit bad_column.json --model colless --out b > /dev/null 2> e.txt
check_eval "unknown column in per: exit 2 naming it" "[ $? -eq 2 ] && grep -q \"'reward'\" e.txt && grep -q \"parameter 'drift'\" e.txt"

# 6. Separate mode: per-animal fits and a group summary.
sed 's/"participants": "pooled"/"participants": "separate"/' study.json > sep.json
"$BANDLINK" fit sep.json --model theta-threshold --out sep --quiet
check_eval "separate mode exits 0" "[ $? -eq 0 ]"
check_eval "separate mode: per-animal fits and group summary" \
  "grep -q '\"participant\":[[:space:]]*\"rat3\"' sep/fits.json && grep -q '\"random_effects\"' sep/fits.json && grep -q '\"tau2\"' sep/fits.json"
check_eval "separate mode: 3 x 8 coefficients" "grep -q '^theta-threshold,24,750,' sep/comparison.csv"
"$BANDLINK" fit sep.json --out sep1 --threads 1 --quiet && "$BANDLINK" fit sep.json --out sep2 --threads 2 --quiet
check_eval "separate mode, all models: 1 vs 2 threads give identical files" \
  "same_fits sep1/fits.json sep2/fits.json && cmp -s sep1/trials.csv sep2/trials.csv && cmp -s sep1/comparison.csv sep2/comparison.csv"

# 7. Stimulus coding: drift toward the chosen category flips with the tone.
"$BL_BUILD_ROOT/tests/fit_make_trials" stim.csv 300 2 5 stimulus
cat > stim.json <<'EOF'
{
  "trials": {"file": "stim.csv", "participant": "animal", "rt": "rt", "response": "choice", "upper": ["high"],
             "stimulus": "tone"},
  "models": [{"name": "tones", "drift": {"per": ["difficulty"]}}],
  "output": "stim_out"
}
EOF
"$BANDLINK" fit stim.json --quiet
check_eval "stimulus coding fits" "[ $? -eq 0 ] && grep -q '^tones,5,600,' stim_out/comparison.csv"
if [ -x /usr/bin/python3 ]; then
  check_eval "stimulus coding: drifts positive (toward the tone's category), predicted drift sign follows the tone" \
    "/usr/bin/python3 - <<'PY'
import json, csv
d = json.load(open('stim_out/fits.json'))
est = {c['level']: c['estimate'] for c in d['models'][0]['coefficients'] if c['parameter'] == 'drift'}
assert est['easy'] > est['medium'] > est['hard'] > 0, est
tones = [r['tone'] for r in csv.DictReader(open('stim.csv'))]
rows = list(csv.DictReader(open('stim_out/trials.csv')))
assert len(rows) == len(tones)
for r, t in zip(rows, tones):
    assert (float(r['drift']) > 0) == (t == 'high'), (r, t)
PY"
fi

finish
