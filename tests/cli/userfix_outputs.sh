#!/usr/bin/env bash
# What first users needed in the outputs, end to end on a simulated study (bandlink simulate, invented
# data) re-coded by stimulus with 8 condition cells, an artifact rule and long model names:
#  - power.csv keeps the raw band power of artifact-flagged trials, regressor NA;
#  - trials.csv carries each trial's condition and regressor columns, equal to power.csv's values;
#  - fit_quantiles.csv has correct/error rows whose counts are recomputed here from choice and tone;
#  - the quantile-probability figure numbers its 8 cells and no legend row is longer than the column;
#  - report.html says "accuracy"; its comparison table fits a 1300 px window (headless Chromium, when
#    /usr/bin/chromium is installed; that part is skipped otherwise);
#  - a response-locked window that reaches before the onset warns with the share and count of windows,
#    recomputed here from the trial table.
# Checks are by counting from the files themselves (python3 csv module); no stored results.
set -u
: "${BANDLINK:?}" "${BL_SOURCE_ROOT:?}"
py=/usr/bin/python3
[ -x "$py" ] || { echo "python3 not installed: skipped"; exit 77; }
tmp=$(mktemp -d /tmp/bl_userfix_XXXXXX)
trap 'rm -rf "$tmp"' EXIT
fails=0
pass() { echo "PASS: $1"; }
fail() { echo "FAIL: $1"; fails=$((fails + 1)); }

"$BANDLINK" simulate "$BL_SOURCE_ROOT/tests/cli/simulate_small.json" --out "$tmp/sim" --quiet ||
    { echo "FAIL: simulate"; exit 1; }
"$py" - "$tmp/sim" <<'PY' || { echo "FAIL: study edit"; exit 1; }
import json, sys
d = sys.argv[1]
s = json.load(open(d + "/study.json"))
s["trials"].update({"response": "choice", "upper": ["higher"], "stimulus": "tone"})
s["power"]["artifacts"] = {"peak_to_peak": 400}
m = s["models"]
m[0]["name"] = "baseline-threshold-per-context-and-drift-per-difficulty"
m[1]["name"] = "theta-threshold-slope-by-context-plus-shared-beta-drift-slope"
m[1]["extends"] = m[0]["name"]
m.append({"name": "beta-drift-only-one-shared-slope-across-every-condition-cell", "extends": m[0]["name"],
          "drift": {"per": ["difficulty"], "slopes": {"beta": []}}})
s["output"] = "res"
json.dump(s, open(d + "/stim.json", "w"), indent=1)
s["power"]["window"] = {"align": "response", "from": -0.6, "to": 0.0}
s["output"] = "resp"
json.dump(s, open(d + "/resp.json", "w"), indent=1)
PY

"$BANDLINK" run "$tmp/sim/stim.json" --quiet 2>"$tmp/run.err" && pass "run (stimulus coding, 8 cells)" ||
    { fail "run: $(tail -2 "$tmp/run.err")"; echo "$fails failed"; exit 1; }

"$py" - "$tmp/sim/res" <<'PY'
import csv, math, re, sys, xml.etree.ElementTree as ET
r = sys.argv[1]
fails = 0
def check(ok, what):
    global fails
    print(("PASS: " if ok else "FAIL: ") + what)
    fails += not ok

power = list(csv.DictReader(open(r + "/power.csv")))
flag = [p for p in power if p["artifact"].startswith("artifact: peak-to-peak")]
check(len(flag) > 0, "the artifact rule flags some trials (%d)" % len(flag))
ok = all(p[b + "_power"] not in ("", "NA") and float(p[b + "_power"]) > 0 and p[b] == "NA"
         for p in flag for b in ("theta", "beta"))
check(ok, "power.csv: flagged trials keep raw theta_power/beta_power, regressors NA")

trials = list(csv.DictReader(open(r + "/trials.csv")))
head = next(csv.reader(open(r + "/trials.csv")))
check(head[10:] == ["context", "difficulty", "tone", "theta", "beta"],
      "trials.csv: condition columns, stimulus, then regressors after log_likelihood: %s" % head[10:])
byk = {(p["participant"], p["trial"]): p for p in power}
bad = [t for t in trials for c in ("context", "difficulty", "tone", "theta", "beta")
       if t[c] != byk[(t["participant"], t["trial"])][c]]
check(not bad and len(trials) > 0, "trials.csv values equal power.csv's for every row and column (%d rows)" % len(trials))
check(not any((t["participant"], t["trial"]) in {(p["participant"], p["trial"]) for p in flag} for t in trials),
      "flagged trials are not in the fit")

q = list(csv.DictReader(open(r + "/fit_quantiles.csv")))
check({x["boundary"] for x in q} == {"correct", "error"}, "fit_quantiles.csv: boundary is correct / error")
used = {}
for t in trials:
    used.setdefault(t["model"], set()).add((t["participant"], t["trial"]))
common = set.intersection(*used.values())
# condition cells; the per-participant rows of hierarchical fits ("animal=a1") are checked apart
part_rows = [x for x in q if x["regressor"] == "NA" and x["condition"].split("=", 1)[0] == "animal"]
check(len({x["condition"] for x in part_rows}) == 3, "fit_quantiles.csv: a group per participant (%d rows)" % len(part_rows))
q = [x for x in q if x not in part_rows]
cells = [x for x in q if x["regressor"] == "NA" and x["boundary"] == "correct"]
nmodels = len(used)
check(len(cells) == 8 * nmodels, "8 condition cells per model (%d rows)" % len(cells))
wrong = 0
for x in q:
    if x["regressor"] != "NA":
        continue
    want = dict(kv.split("=", 1) for kv in x["condition"].split(";"))
    g = [byk[k] for k in common if all(byk[k][c] == v for c, v in want.items())]
    correct = sum((p["choice"] == "higher") == (p["tone"] == "higher") for p in g)
    n = correct if x["boundary"] == "correct" else len(g) - correct
    wrong += int(x["trials"]) != len(g) or int(x["responses"]) != n or abs(float(x["observed_share"]) - n / len(g)) > 1e-12
check(wrong == 0, "cell rows: trials, correct/error counts and accuracy recounted from choice and tone")

svg = open(r + "/figures/quantile_probability.svg", encoding="utf-8").read()
ET.fromstring(svg)
check("cells (numbered by predicted accuracy)" in svg, "QP figure: cell legend")
leg = svg[svg.index('-legend">'):]
rows = re.findall(r"<text [^>]*>([^<]*)</text>", leg)
check(len(rows) >= 8 and max(len(t) for t in rows) <= 44, "QP legend rows at most 44 characters (%d rows, longest %d)"
      % (len(rows), max(len(t) for t in rows)))
joined = "".join(rows).replace(" ", "")
check(all(c["condition"].replace(" ", "") in joined for c in cells), "QP legend holds every cell's full condition")
page = open(r + "/report.html", encoding="utf-8").read()
check("accuracy, condition cells" in page and '<table class="cmp">' in page,
      "report.html: accuracy in the goodness table; comparison table of class cmp")
sys.exit(1 if fails else 0)
PY
[ $? -eq 0 ] || fails=$((fails + 1))

# The comparison table fits a 1300 px window: Chromium lays the page out and a script copy (the page
# itself forbids scripts) writes the table's width and its container's into the DOM.
chromium=/usr/bin/chromium
if [ -x "$chromium" ]; then
    sed -e '/Content-Security-Policy/d' -e 's|</body>|<script>var d=document.getElementById("comparison").nextElementSibling;document.body.setAttribute("data-fit",Math.ceil(d.querySelector("table").getBoundingClientRect().width)+" "+d.clientWidth+" "+document.documentElement.scrollWidth);</script></body>|' \
        "$tmp/sim/res/report.html" >"$tmp/measure.html"
    timeout 120 "$chromium" --headless --no-sandbox --disable-gpu --no-first-run --disable-background-networking \
        --disable-component-update --disable-sync --hide-scrollbars --user-data-dir="$tmp/profile" \
        --window-size=1300,2000 --dump-dom "file://$tmp/measure.html" 2>/dev/null >"$tmp/dom.html"
    read -r tw cw sw < <(grep -o 'data-fit="[^"]*"' "$tmp/dom.html" | tr -dc '0-9 \n')
    if [ -n "${tw:-}" ] && [ "$tw" -le "$cw" ] && [ "$sw" -le 1300 ]; then
        pass "comparison table fits at 1300 px (table $tw px, room $cw px, page $sw px)"
    else
        fail "comparison table too wide at 1300 px (table ${tw:-?} px, room ${cw:-?} px, page ${sw:-?} px)"
    fi
else
    echo "chromium not installed: the 1300 px layout check is skipped"
fi

# A response-locked window that starts before the onset on fast trials: the warning's share and count.
"$BANDLINK" power "$tmp/sim/resp.json" --out "$tmp/sim/resp" 2>"$tmp/power.err" >/dev/null ||
    fail "power with a response-locked window: $(tail -1 "$tmp/power.err")"
want=$("$py" - "$tmp/sim" <<'PY'
import csv, sys
rows = list(csv.DictReader(open(sys.argv[1] + "/trials.csv")))
kept = [float(r["rt"]) for r in rows if 0.1 <= float(r["rt"]) <= 6.0]   # keep.rt_min / rt_max of the study
n = sum(rt - 0.6 < 0 for rt in kept)
print("begins before the stimulus onset in %.1f%% of windows (%d of %d" % (100.0 * n / len(kept), n, len(kept)))
PY
)
if grep -qF "$want" "$tmp/power.err"; then
    pass "warning: $want"
else
    fail "warning with '$want' expected; got: $(grep -m1 window "$tmp/power.err")"
fi
grep -q 'docs/study-file.md, "Windows and response times"' "$tmp/power.err" && pass "warning points to the docs" ||
    fail "warning does not point to the docs"

[ "$fails" -eq 0 ] && echo "all passed" || echo "$fails failed"
[ "$fails" -eq 0 ]
