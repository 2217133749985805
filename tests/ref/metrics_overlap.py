#!/usr/bin/python3
"""Reference voxel-overlap scores from scikit-learn (Debian python3-sklearn).

Usage: metrics_overlap.py PRED_RAW_UINT8 REF_RAW_UINT8
Both files hold the same number of uint8 voxels (non-zero = pore). Prints JSON with
sklearn.metrics jaccard_score, f1_score (= Dice), precision_score and recall_score of the
flattened masks, the positive class being "pore".
"""
import json
import sys

import numpy as np
from sklearn import metrics


def main():
    pred = np.fromfile(sys.argv[1], dtype=np.uint8) != 0
    ref = np.fromfile(sys.argv[2], dtype=np.uint8) != 0
    print(json.dumps({
        "jaccard": float(metrics.jaccard_score(ref, pred)),
        "dice": float(metrics.f1_score(ref, pred)),
        "precision": float(metrics.precision_score(ref, pred)),
        "recall": float(metrics.recall_score(ref, pred)),
    }))


if __name__ == "__main__":
    main()
