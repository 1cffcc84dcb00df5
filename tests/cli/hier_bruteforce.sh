#!/usr/bin/env bash
# Hierarchical fits against brute force: a tiny study (3 participants x 30 trials, the threshold
# intercept varying by participant) fitted with adaptive Gauss-Hermite (20 nodes) and with Laplace;
# tests/reference/hier_reference.py recomputes the marginal log-likelihood at the reported estimates
# with its own Wiener density (Navarro & Fuss 2009 series) and scipy.integrate.quad over the effect:
#   - Gauss-Hermite, 20 nodes (Pinheiro & Bates 1995): equal to quad to 1e-6;
#   - the reported estimates are a maximum of the quad marginal (moves of 0.1 SE / 5% of the SD);
#   - Laplace (Tierney & Kadane 1986): equal to the Laplace formula evaluated by the reference, and
#     off quad by the leading O(1/n) term of its error, h4/(8H^2) + 5 h3^2/(24H^3) per participant.
# Measured when written: Gauss-Hermite vs quad 3.6e-11; Laplace vs quad -4.13e-3 in all (about 1.4e-3 per
# participant of 30 trials, against 1/n = 0.033), its leading term predicting -4.20e-3 (2% off: the
# O(1/n^2) rest); a 0.1-SE move lowers the quad marginal by 5.1e-3 to 5.2e-3, a 5% move of the SD by 5.7e-3 to 6.6e-3.
# Data: invented trials drawn by the reference's seeded random walk. Skipped without scipy/numpy.
set -u
. "$(dirname "$0")/lib.sh"
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
py=/usr/bin/python3
ref="$BL_SOURCE_ROOT/tests/reference/hier_reference.py"
[ -x "$py" ] || skip "no /usr/bin/python3"
"$py" -c 'import numpy, scipy' 2>/dev/null || skip "python3-numpy or python3-scipy missing"

cd "$tmp" || bail "cd $tmp"
"$py" "$ref" trials trials.csv 3 30 7 0.35 0 0 || bail "trials"
check_eval "3 x 30 trials" "[ \$(wc -l < trials.csv) -eq 91 ]"

# One varying term: the threshold intercept; drift per difficulty and nondecision fixed effects.
study() {
  cat <<JSON
{
  "trials": {"file": "trials.csv", "participant": "participant", "rt": "rt", "response": "correct", "upper": ["1"]},
  "fit": {"participants": "hierarchical", "quadrature": $1},
  "models": [
    {"name": "tiny", "threshold": {"varies": ["intercept"]}, "drift": {"per": ["difficulty"], "varies": []},
     "nondecision": {"varies": []}}
  ]
}
JSON
}
study 20 > gh20.json
study 1 > laplace.json
expect_exit 0 "$BANDLINK" fit gh20.json --out gh20 --quiet
expect_exit 0 "$BANDLINK" fit laplace.json --out laplace --quiet
check_eval "gauss-hermite fit says so" \
  "grep -q '\"integration\":[[:space:]]*\"gauss-hermite\"' gh20/fits.json && grep -q '\"quadrature\":[[:space:]]*20' gh20/fits.json"
check_eval "laplace fit says so" "grep -q '\"integration\":[[:space:]]*\"laplace\"' laplace/fits.json"
[ -s gh20/fits.json ] && [ -s laplace/fits.json ] || bail "no fits.json"
tally "$py" "$ref" check gh20/fits.json laplace/fits.json trials.csv tiny
finish
