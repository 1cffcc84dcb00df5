"""Outside checks of the report module's files, written by tests/report_sample into a folder.

  report_reference.py SAMPLE_PROGRAM

1. Every figure is well-formed XML 1.0 (python's xml.etree parser) with an <svg> root in the SVG
   namespace, and so is every <svg> element inlined in report.html.
2. report.html parses with python's html.parser with no unclosed elements among those we close.
3. The observed columns of fit_quantiles.csv equal numpy's own computation from the trial data:
   numpy.quantile (default method 'linear' = Hyndman & Fan 1996 definition 7) per condition cell and per
   quintile bin (bins: ranks split into five equal-count groups, numpy.argsort with a stable sort).
Exit 77 (skipped) when numpy is not installed.
"""
import csv
import html.parser
import os
import re
import subprocess
import sys
import tempfile
import xml.etree.ElementTree as ET

try:
    import numpy as np
except ImportError:
    print("numpy not installed: skipped")
    sys.exit(77)

SVG_NS = "{http://www.w3.org/2000/svg}svg"
failures = 0
checks = 0


def check(ok, what):
    global failures, checks
    checks += 1
    print(("PASS: " if ok else "FAIL: ") + what)
    if not ok:
        failures += 1


class Balance(html.parser.HTMLParser):
    VOID = {"meta", "br", "hr", "img", "input", "link", "path", "rect", "circle"}

    def __init__(self):
        super().__init__()
        self.stack = []
        self.errors = []

    def handle_starttag(self, tag, attrs):
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        pass

    def handle_endtag(self, tag):
        if tag in self.VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append("unexpected </%s> (open: %s)" % (tag, self.stack[-3:]))
            return
        self.stack.pop()


def run(sample, outdir, mode):
    subprocess.run([sample, outdir] + ([mode] if mode else []), check=True)
    figdir = os.path.join(outdir, "figures")
    names = sorted(os.listdir(figdir))
    check(len(names) == 5, "%s: five figures written (%s)" % (mode or "pooled", names))
    for n in names:
        try:
            root = ET.parse(os.path.join(figdir, n)).getroot()
            check(root.tag == SVG_NS, "%s: XML 1.0 well-formed, root is svg:svg" % n)
            texts = [t.text or "" for t in root.iter("{http://www.w3.org/2000/svg}text")]
            check(len(texts) > 5, "%s: has text (%d elements)" % (n, len(texts)))
        except ET.ParseError as e:
            check(False, "%s: XML parse error %s" % (n, e))
    page = open(os.path.join(outdir, "report.html"), encoding="utf-8").read()
    inline = re.findall(r"<svg xmlns=.*?</svg>", page, flags=re.S)
    check(len(inline) == 5, "report: five inline svg elements")
    for i, s in enumerate(inline):
        try:
            check(ET.fromstring(s).tag == SVG_NS, "report: inline svg %d is well-formed XML" % i)
        except ET.ParseError as e:
            check(False, "report: inline svg %d: %s" % (i, e))
    p = Balance()
    p.feed(page)
    p.close()
    check(not p.errors and not p.stack, "report: elements balanced per html.parser (%s %s)" % (p.errors[:2], p.stack))
    return page


def observed(outdir):
    trials = list(csv.DictReader(open(os.path.join(outdir, "sample_trials.csv"))))
    used = [t for t in trials if t["used"] == "1"]
    rows = list(csv.DictReader(open(os.path.join(outdir, "fit_quantiles.csv"))))
    probs = [0.1, 0.3, 0.5, 0.7, 0.9]

    def groups():
        for ctx in ["rich", "lean"]:
            cell = [t for t in used if t["context"] == ctx]
            yield ("context=" + ctx, "NA", "NA"), cell
            theta = np.array([float(t["theta"]) for t in cell])
            order = np.argsort(theta, kind="stable")
            n = len(cell)
            for b in range(5):
                lo, hi = -(-n * b // 5), -(-n * (b + 1) // 5)
                yield ("context=" + ctx, "theta", str(b + 1)), [cell[i] for i in order[lo:hi]]

    compared = 0
    for key, members in groups():
        for boundary in ["upper", "lower"]:
            want_up = boundary == "upper"
            rts = np.array([float(t["rt"]) for t in members if (t["upper"] == "1") == want_up])
            for r in rows:
                if (r["condition"], r["regressor"], r["bin"]) != key or r["boundary"] != boundary:
                    continue
                ok = int(r["trials"]) == len(members) and int(r["responses"]) == len(rts)
                ok = ok and abs(float(r["observed_share"]) - len(rts) / len(members)) < 1e-15
                for p in probs:
                    got = float(r["observed_q%d" % round(100 * p)])
                    ok = ok and abs(got - float(np.quantile(rts, p))) <= 1e-12 * max(1.0, abs(got))
                check(ok, "numpy.quantile and shares: %s %s (%s)" % ("/".join(key), boundary, r["model"]))
                compared += 1
    check(compared == 2 * 2 * 12, "every model x group x boundary compared (%d)" % compared)


def main():
    sample = sys.argv[1]
    with tempfile.TemporaryDirectory() as d:
        run(sample, os.path.join(d, "pooled"), None)
        observed(os.path.join(d, "pooled"))
        page = run(sample, os.path.join(d, "separate"), "separate")
        check("Participant r1" in page, "separate report lists participants")
    print("%d checks passed, %d failed" % (checks - failures, failures))
    sys.exit(1 if failures else 0)


main()
