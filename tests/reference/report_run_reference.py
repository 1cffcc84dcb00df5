"""End to end: `bandlink simulate` + `bandlink run` on the small scenario, then outside checks of the
report module's files on real pipeline output.

- every figures/*.svg and every <svg> inlined in report.html is well-formed XML 1.0 (xml.etree);
- report.html parses with html.parser;
- fit_quantiles.csv, every row, recomputed independently from power.csv (trial columns and
  regressors) and trials.csv (which trials each model used, their predicted p_upper):
  trials, responses and observed share by counting; observed quantiles by numpy.quantile (default
  'linear' = Hyndman & Fan 1996 definition 7); regressor quintiles by a stable numpy argsort split
  into 5 equal-count groups; predicted_share as the mean of trials.csv's p_upper (with stimulus
  coding: of each trial's probability of the response its stimulus calls for, rows correct/error).
Environment: BANDLINK (the binary), BL_SOURCE_ROOT. Exit 77 when numpy is missing.
"""
import csv
import os
import re
import subprocess
import sys
import tempfile
import xml.etree.ElementTree as ET
import html.parser
import json

try:
    import numpy as np
except ImportError:
    print("numpy not installed: skipped")
    sys.exit(77)

failures = checks = 0


def check(ok, what):
    global failures, checks
    checks += 1
    print(("PASS: " if ok else "FAIL: ") + what)
    if not ok:
        failures += 1


def close(a, b, tol=1e-12):
    return abs(a - b) <= tol * max(1.0, abs(b))


def main():
    bl = os.environ["BANDLINK"]
    scenario = os.path.join(os.environ["BL_SOURCE_ROOT"], "tests", "cli", "simulate_small.json")
    with tempfile.TemporaryDirectory() as d:
        sim = os.path.join(d, "study")
        subprocess.run([bl, "simulate", scenario, "--out", sim, "--quiet"], check=True)
        subprocess.run([bl, "run", os.path.join(sim, "study.json"), "--quiet"], check=True)
        study = json.load(open(os.path.join(sim, "study.json")))
        res = os.path.join(sim, study.get("output", "results"))

        figs = sorted(f for f in os.listdir(os.path.join(res, "figures")) if f.endswith(".svg"))
        fits = json.load(open(os.path.join(res, "fits.json")))
        # five figures, six when the study was fitted hierarchically (the shrinkage figure)
        want = 6 if fits["mode"] == "hierarchical" else 5
        check(len(figs) == want, "%d figures (%s fits): %s" % (want, fits["mode"], figs))
        for f in figs:
            try:
                root = ET.parse(os.path.join(res, "figures", f)).getroot()
                check(root.tag == "{http://www.w3.org/2000/svg}svg", "%s is well-formed SVG" % f)
            except ET.ParseError as e:
                check(False, "%s: %s" % (f, e))
        page = open(os.path.join(res, "report.html"), encoding="utf-8").read()
        inline = re.findall(r"<svg xmlns=.*?</svg>", page, flags=re.S)
        check(len(inline) == want, "report.html inlines every figure (%d)" % want)
        for i, s in enumerate(inline):
            try:
                ET.fromstring(s)
                check(True, "inline svg %d well-formed" % i)
            except ET.ParseError as e:
                check(False, "inline svg %d: %s" % (i, e))
        hp = html.parser.HTMLParser()
        hp.feed(page)
        hp.close()
        check("not a medical device" in page, "report.html carries the caution")

        tr = study["trials"]
        power = list(csv.DictReader(open(os.path.join(res, "power.csv"))))
        key = {(r["participant"], r["trial"]): i for i, r in enumerate(power)}
        scale = 0.001 if tr.get("rt_unit") == "ms" else 1.0
        rt = np.array([float(r[tr["rt"]]) * scale if r[tr["rt"]] not in ("", "NA") else np.nan for r in power])
        upper = np.array([r[tr["response"]] in tr["upper"] for r in power])
        # Stimulus coding: rows are correct / error responses; a trial is correct when its response
        # category is the one its stimulus calls for (docs/report.md).
        stim = tr.get("stimulus")
        toward_upper = np.array([r[stim] in tr["upper"] for r in power]) if stim else np.ones(len(power), bool)
        used, pup = {}, {}
        for r in csv.DictReader(open(os.path.join(res, "trials.csv"))):
            i = key[(r["participant"], r["trial"])]
            used.setdefault(r["model"], set()).add(i)
            pup[(r["model"], i)] = float(r["p_upper"])
        # Groups use the trials every model used.
        common = sorted(set.intersection(*used.values()))
        rows = list(csv.DictReader(open(os.path.join(res, "fit_quantiles.csv"))))
        check(len(rows) > 0, "fit_quantiles.csv has rows (%d)" % len(rows))

        def members(cond, regressor, b):
            m = common
            if cond != "all":
                for part in cond.split(";"):
                    col, val = part.split("=", 1)
                    m = [i for i in m if power[i][col] == val]
            if regressor == "NA":
                return m
            x = np.array([float(power[i][regressor]) for i in m])
            order = np.argsort(x, kind="stable")
            n, b = len(m), int(b) - 1
            lo, hi = -(-n * b // 5), -(-n * (b + 1) // 5)
            return [m[j] for j in order[lo:hi]]

        bad = []
        for r in rows:
            g = members(r["condition"], r["regressor"], r["bin"])
            want_up = r["boundary"] in ("upper", "correct")
            check_coding = r["boundary"] in (("correct", "error") if stim else ("upper", "lower"))
            if not check_coding:
                bad.append("boundary %s under %s coding" % (r["boundary"], "stimulus" if stim else "accuracy"))
            hit = (lambda i: upper[i] == toward_upper[i]) if stim else (lambda i: upper[i])
            resp = np.array([rt[i] for i in g if hit(i) == want_up])
            ok = int(r["trials"]) == len(g) and int(r["responses"]) == len(resp)
            ok = ok and close(float(r["observed_share"]), len(resp) / len(g))
            ps = np.mean([pup[(r["model"], i)] if toward_upper[i] else 1 - pup[(r["model"], i)] for i in g])
            ok = ok and close(float(r["predicted_share"]), ps if want_up else 1 - ps, 1e-9)
            for p in (10, 30, 50, 70, 90):
                got = r["observed_q%d" % p]
                if len(resp) == 0:
                    ok = ok and got == "NA"
                else:
                    ok = ok and close(float(got), float(np.quantile(resp, p / 100)))
                pq = r["predicted_q%d" % p]
                ok = ok and (pq == "NA" or float(pq) > 0)
            if not ok:
                bad.append("%s %s %s %s %s" % (r["model"], r["condition"], r["regressor"], r["bin"], r["boundary"]))
        check(not bad, "every row (%d) matches numpy and trials.csv%s" % (len(rows), (": " + "; ".join(bad[:3])) if bad else ""))
        nbins = sum(1 for r in rows if r["regressor"] != "NA")
        check(nbins > 0, "regressor bin rows present (%d)" % nbins)
    print("%d checks passed, %d failed" % (checks - failures, failures))
    sys.exit(1 if failures else 0)


main()
