#!/usr/bin/env python3
"""Check a `terrastack sample` separability report against scikit-learn and numpy.

Usage: python3 scripts/xcheck_separability.py TABLE.csv

Reads the table (CSV: sample_id, class, x, y, fold, then the bands) and the report
written beside it (TABLE.separability.json), and checks per band, over the rows with a
value in that band:
  * the ANOVA F statistic and its p-value equal scikit-learn's
    sklearn.feature_selection.f_classif (relative 1e-9; p-values below 1e-250 only
    checked to be tiny on both sides);
  * the Jeffries-Matusita distance of every class pair equals the Gaussian formula
    JM = 2(1 - exp(-B)), B = (m1 - m2)^2 / (4 (v1 + v2)) + ln((v1 + v2) / (2 sqrt(v1 v2))) / 2,
    written here with numpy means and unbiased variances (relative 1e-9);
  * the correlation matrix equals numpy.corrcoef over the rows valid in both bands
    (absolute 1e-12), and the correlated groups equal the connected components of
    |r| >= threshold (scipy.sparse.csgraph.connected_components).
Exits 1 with a message on the first mismatch.
"""

import csv
import json
import sys
from pathlib import Path

import numpy as np
from scipy.sparse.csgraph import connected_components
from sklearn.feature_selection import f_classif


def fail(msg):
    sys.exit(f"FAIL {msg}")


def close(a, b, rel, what):
    a, b = float("nan") if a is None else a, float("nan") if b is None else b
    if np.isnan(a) and np.isnan(b):
        return
    if not abs(a - b) <= rel * max(abs(a), abs(b)):
        fail(f"{what}: terrastack {a!r}, reference {b!r}")


def main():
    table = Path(sys.argv[1])
    report = json.loads(table.with_suffix(".separability.json").read_text())
    with open(table, newline="") as f:
        rows = list(csv.reader(f))
    header, rows = rows[0], rows[1:]
    # sample_id, class, x, y, fold, then `block` (--block-size) and `cells` (--aggregate)
    # when present, then the bands.
    first = 5 + sum(1 for c in ("block", "cells") if c in header[5:7])
    bands = header[first:]
    texts = [v for r in rows for v in r[first:] if v != ""]
    # Cell tables hold float32 values printed in their shortest form, aggregated tables
    # float64 ones: read every value as float32 when every text is a float32's shortest
    # form, so both sides see the same numbers.
    as_f32 = all(float(np.format_float_positional(np.float32(t), unique=True)) == float(t)
                 for t in texts)
    read = (lambda t: float(np.float32(t))) if as_f32 else float
    X = np.array([[read(v) if v != "" else np.nan for v in r[first:]] for r in rows]).reshape(-1, len(bands))
    y = np.array([r[1] for r in rows])
    classes = report["classes"]
    if [b["band"] for b in report["bands"]] != bands:
        fail("the report's bands are not the table's")
    if report["rows"] != len(rows):
        fail(f"report counts {report['rows']} rows, the table has {len(rows)}")
    pairs = report["pairs"]
    for b, band in enumerate(bands):
        ok = np.isfinite(X[:, b])
        x, lab = X[ok, b], y[ok]
        got = report["bands"][b]
        if len(np.unique(lab)) >= 2:
            f, p = f_classif(x.reshape(-1, 1), lab)
            close(got["anova_f"], f[0], 1e-9, f"{band}: F")
            if p[0] > 1e-250:
                close(got["p_value"], p[0], 1e-6, f"{band}: p-value")
            elif got["p_value"] is None or got["p_value"] > 1e-240:
                fail(f"{band}: p-value {got['p_value']} where scikit-learn gives {p[0]}")
        for k, (i, j) in enumerate(pairs):
            a, c = x[lab == classes[i]], x[lab == classes[j]]
            if len(a) < 2 or len(c) < 2:
                want = np.nan
            else:
                m1, m2, v1, v2 = a.mean(), c.mean(), a.var(ddof=1), c.var(ddof=1)
                if v1 == 0 or v2 == 0:
                    want = 0.0 if (v1 == v2 and m1 == m2) else 2.0
                else:
                    B = (m1 - m2) ** 2 / (4 * (v1 + v2)) + 0.5 * np.log((v1 + v2) / (2 * np.sqrt(v1 * v2)))
                    want = 2 * (1 - np.exp(-B))
            close(got["jm"][k], want, 1e-9, f"{band}: JM {classes[i]}/{classes[j]}")
    n = len(bands)
    r = np.full((n, n), np.nan)
    for i in range(n):
        for j in range(n):
            ok = np.isfinite(X[:, i]) & np.isfinite(X[:, j])
            if ok.sum() >= 2 and X[ok, i].std() > 0 and X[ok, j].std() > 0:
                r[i, j] = np.corrcoef(X[ok, i], X[ok, j])[0, 1]
    got_r = np.array([[np.nan if v is None else v for v in row] for row in report["correlation"]])
    both = np.isfinite(r) & np.isfinite(got_r)
    if not (np.isfinite(r) == np.isfinite(got_r)).all() or np.abs(r[both] - got_r[both]).max(initial=0) > 1e-12:
        fail(f"correlation matrix differs from numpy.corrcoef by {np.abs(r[both] - got_r[both]).max()}")
    t = report["correlation_threshold"]
    adj = np.nan_to_num(np.abs(r)) >= t
    _, comp = connected_components(adj, directed=False)
    want_groups = []
    for c in dict.fromkeys(comp):
        members = [bands[i] for i in range(n) if comp[i] == c]
        if len(members) > 1:
            want_groups.append(members)
    if want_groups != report["correlated_groups"]:
        fail(f"groups {report['correlated_groups']} differ from the components {want_groups}")
    print(f"{table}: F and p equal scikit-learn's f_classif, JM equal numpy's Gaussian formula, "
          f"correlations equal numpy.corrcoef, {len(want_groups)} correlated group(s) equal "
          f"the connected components ({len(bands)} bands, {len(rows)} rows, {len(classes)} classes)")


if __name__ == "__main__":
    if len(sys.argv) != 2:
        sys.exit(__doc__)
    main()
