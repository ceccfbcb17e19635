#!/usr/bin/env python3
"""Train a random forest on a `terrastack sample` table, one round per fold.

Usage: python3 scripts/sample_forest.py TABLE.csv [--trees N] [--seed N]

The table's columns are sample_id, class, x, y, fold, [block], [cells], then one column per
stack band; the
bands are the predictors, the class is the target, and the fold column defines the
cross-validation: each fold is held out once (scikit-learn's LeaveOneGroupOut with the
folds as groups, i.e. the predefined folds), so cells of one sample (or of one spatial
block) are never on both sides. Rows with an empty (nodata) predictor are left out and
counted. Prints the accuracy of each fold, their mean and standard deviation.

Needs numpy and scikit-learn.
"""

import argparse
import csv
import sys

import numpy as np
from sklearn.ensemble import RandomForestClassifier
from sklearn.model_selection import LeaveOneGroupOut

FIXED = ["sample_id", "class", "x", "y", "fold"]


def load(path):
    try:
        with open(path, newline="") as f:
            reader = csv.reader(f)
            header = next(reader)
            rows = list(reader)
    except (OSError, StopIteration) as e:
        sys.exit(f"error: {path}: cannot read the table ({e})\n"
                 "  fix: give a CSV written by `terrastack sample`")
    if header[:5] != FIXED or len(header) < 6:
        sys.exit(f"error: {path}: the header does not start with {','.join(FIXED)} "
                 "followed by band columns\n  fix: give a CSV written by `terrastack sample`")
    # `block` (spatial block id) and `cells` (cells per aggregated row) follow `fold` when
    # present; they describe the rows and are not predictors.
    first = 5
    while first < len(header) and header[first] in ("block", "cells"):
        first += 1
    bands = header[first:]
    keep = [r for r in rows if all(v != "" for v in r[first:])]
    X = np.array([[float(v) for v in r[first:]] for r in keep], dtype=np.float64).reshape(-1, len(bands))
    y = np.array([r[1] for r in keep])
    folds = np.array([int(r[4]) for r in keep])
    return bands, X, y, folds, len(rows) - len(keep)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("table")
    ap.add_argument("--trees", type=int, default=200)
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()

    bands, X, y, folds, dropped = load(args.table)
    fold_ids = np.unique(folds)
    if len(fold_ids) < 2:
        sys.exit(f"error: {args.table}: {len(fold_ids)} fold(s) with data; at least 2 are needed\n"
                 "  fix: make the table with `terrastack sample --folds K` (K >= 2) and enough samples")
    print(f"{args.table}: {len(y)} rows, {len(bands)} predictors, "
          f"{len(np.unique(y))} classes, {len(fold_ids)} folds"
          + (f"; {dropped} row(s) with nodata left out" if dropped else ""))
    accuracies = []
    for train, test in LeaveOneGroupOut().split(X, y, groups=folds):
        model = RandomForestClassifier(n_estimators=args.trees, random_state=args.seed)
        model.fit(X[train], y[train])
        acc = float(np.mean(model.predict(X[test]) == y[test]))
        accuracies.append(acc)
        print(f"fold {folds[test][0]}: accuracy {acc:.4f} ({len(test)} rows held out)")
    acc = np.array(accuracies)
    # Population standard deviation over folds (numpy's default, ddof=0).
    print(f"mean accuracy {acc.mean():.4f}, standard deviation {acc.std():.4f}")


if __name__ == "__main__":
    main()
