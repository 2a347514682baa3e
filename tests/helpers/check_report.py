#!/usr/bin/python3
# Cross-checks brink's outputs for one run folder with independent parsers
# (Python's json, csv and xml.etree): report.json against the CSV and
# JSON-lines exports, and the HTML report's charts and tables against both.
# Usage: check_report.py FOLDER EXPORT.csv EXPORT.jsonl REPORT.html [inproc]
# Prints "ok" and exits 0, or prints what differs and exits 1.
#
# SPDX-License-Identifier: MIT
import csv
import json
import math
import sys
import xml.etree.ElementTree as ET

SVG = "{http://www.w3.org/2000/svg}"
XH = "{http://www.w3.org/1999/xhtml}"
problems = []


def check(cond, what):
    if not cond:
        problems.append(what)


folder, csv_path, jl_path, html_path = sys.argv[1:5]
inproc = len(sys.argv) > 5 and sys.argv[5] == "inproc"
rep = json.load(open(folder + "/report.json"))
for k in ["pf", "beta", "cov", "ci", "ci_level", "ci_method", "evaluations",
          "failures", "model_errors", "excluded", "pf_bounds", "method",
          "seed", "study", "history"]:
    check(k in rep, "report.json lacks " + k)

rows = []
if not inproc:
    rows = list(csv.DictReader(open(csv_path, newline="")))
    lines = [json.loads(x) for x in open(jl_path)]
    check(len(rows) == rep["evaluations"],
          "csv rows %d != evaluations %d" % (len(rows), rep["evaluations"]))
    check(len(lines) == len(rows), "json lines and csv rows differ in count")
    gcol = "limit_state" if "limit_state" in rows[0] else "g"
    for r in rows:
        r["_g"] = r[gcol]
    ok = [r for r in rows if r["status"] == "ok"]
    errs = [r for r in rows if r["status"] != "ok"]
    check(sum(r["failed"] == "1" for r in ok) == rep["failures"],
          "failed rows != failures")
    check(len(errs) == rep["model_errors"], "error rows != model_errors")
    for r, j in zip(rows, lines):
        check(r["key"] == j["key"], "key order differs")
        for name, v in r.items():
            if name in ("key", "status", "host", "reason", "folder", "failed") or \
                    name.startswith("_"):
                continue
            jv = j[name]
            if v == "":
                check(jv is None, "empty csv cell but json %r" % jv)
            else:
                check(jv is not None and float(v) == float(jv),
                      "%s %s: csv %s json %s" % (r["key"], name, v, jv))
        if r["status"] == "ok":
            check(float(r["_g"]) <= 0 and r["failed"] == "1" or
                  float(r["_g"]) > 0 and r["failed"] == "0",
                  "failed flag wrong for " + r["key"])

tree = ET.parse(html_path)
charts = {s.get("data-chart"): s for s in tree.iter(SVG + "svg")}
for c in ["g-histogram", "influence", "scatter"]:
    check(c in charts, "chart %s missing" % c)
check(("convergence" in charts) == (len(rep["history"]) >= 2),
      "convergence chart present iff the history has two points or more")
if not inproc:
    check("run-times" in charts, "chart run-times missing")

# Convergence: one point per history entry, the same numbers.
pts = []
if "convergence" in charts:
    pts = [c for c in charts["convergence"].iter(SVG + "circle")
           if c.get("data-n") is not None]
    check(len(pts) == len(rep["history"]), "convergence points != history")
for c, h in zip(pts, rep["history"]):
    check(float(c.get("data-n")) == h[0] and
          math.isclose(float(c.get("data-pf")), h[1], rel_tol=1e-15),
          "convergence point differs from history")

# Histogram of g: counts add up; the bins left of 0 hold the failures.
bins = [r for r in charts["g-histogram"].iter(SVG + "rect")
        if r.get("data-count") is not None]
total = sum(int(b.get("data-count")) for b in bins)
fails = sum(int(b.get("data-count")) for b in bins
            if float(b.get("data-hi")) <= 0)
if inproc:
    n = min(20000, rep["evaluations"])
    check(total == n, "histogram holds %d, expected %d" % (total, n))
else:
    ok = [r for r in rows if r["status"] == "ok"]
    check(total == len(ok), "histogram total %d != ok rows %d" %
          (total, len(ok)))
    check(fails == rep["failures"], "failure bins %d != failures %d" %
          (fails, rep["failures"]))
    gs = sorted(float(r["_g"]) for r in ok)
    for b in bins:
        lo, hi = float(b.get("data-lo")), float(b.get("data-hi"))
        inside = sum(lo <= g < hi for g in gs)
        # g exactly 0 counts as failure, in the bin left of the line.
        if hi == 0:
            inside += sum(g == 0 for g in gs)
        if lo == 0:
            inside -= sum(g == 0 for g in gs)
        if b is bins[-1]:
            inside += sum(g >= hi for g in gs)
        check(inside == int(b.get("data-count")),
              "bin [%g, %g) holds %s, records say %d" %
              (lo, hi, b.get("data-count"), inside))
    table = [t for t in tree.iter(XH + "table")
             if t.get("data-table") == "model-errors"]
    if rep["model_errors"]:
        check(len(table) == 1, "no model error table")
        if table:
            n_rows = len(table[0].findall(XH + "tr")) - 1
            check(n_rows == min(500, rep["model_errors"]),
                  "error table has %d rows" % n_rows)
    times = [r for r in charts["run-times"].iter(SVG + "rect")
             if r.get("data-count") is not None]
    check(sum(int(t.get("data-count")) for t in times) == len(ok),
          "run-time histogram total differs")

bars = [r for r in charts["influence"].iter(SVG + "rect")
        if r.get("data-var") is not None]
check(len(bars) >= 2, "influence chart has %d bars" % len(bars))
text = "".join(tree.getroot().itertext())
check("licensed engineer" in text, "caution missing")
check("failure probability" in text, "label missing")

if problems:
    print("\n".join(problems[:20]))
    sys.exit(1)
print("ok")
