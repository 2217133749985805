#!/usr/bin/python3
"""Reference for metrics/probability.cpp: scikit-learn (Debian python3-sklearn) on the same voxels.

  probability_sklearn.py PROB.npy REF.npy ROI.npy Z0 Z1 > out.json

Voxels: ROI != 0 in slices [Z0, Z1) of arrays indexed [z, y, x]. Prints JSON:
  average_precision   sklearn.metrics.average_precision_score(y, p)
  brier_score         sklearn.metrics.brier_score_loss(y, p)
  prob_true, prob_pred sklearn.calibration.calibration_curve(y, p, n_bins=10, strategy="uniform")
  counts              voxels per non-empty bin, binned as calibration_curve bins (np.searchsorted
                      of the inner edges of np.linspace(0, 1, 11), its source in sklearn 1.2)
  ece                 sum counts / N * |prob_true - prob_pred| (Guo et al. 2017, ICML)
  jaccard_at          sklearn.metrics.jaccard_score(y, p >= float32(t)) for t = 0.05 ... 0.95
  porosity_bias_pp_at 100 * (sum(p >= t) - sum(y)) / N"""
import json
import sys

import numpy as np
from sklearn.calibration import calibration_curve
from sklearn.metrics import average_precision_score, brier_score_loss, jaccard_score

prob, ref, roi = (np.load(a) for a in sys.argv[1:4])
z0, z1 = int(sys.argv[4]), int(sys.argv[5])
sel = np.zeros(prob.shape, bool)
sel[z0:z1] = roi[z0:z1] != 0
p = prob[sel]
y = (ref[sel] != 0).astype(int)
prob_true, prob_pred = calibration_curve(y, p, n_bins=10, strategy="uniform")
bins = np.linspace(0.0, 1.0, 11)
counts = np.bincount(np.searchsorted(bins[1:-1], p), minlength=10)
counts = counts[counts != 0]
ece = float(np.sum(counts / len(p) * np.abs(prob_true - prob_pred)))
ts = [0.05 * k for k in range(1, 20)]
out = {
    "voxels": int(len(p)),
    "positives": int(y.sum()),
    "average_precision": float(average_precision_score(y, p)),
    "brier_score": float(brier_score_loss(y, p)),
    "prob_true": prob_true.tolist(),
    "prob_pred": prob_pred.tolist(),
    "counts": counts.tolist(),
    "ece": ece,
    "jaccard_at": [float(jaccard_score(y, (p >= np.float32(t)).astype(int))) for t in ts],
    "porosity_bias_pp_at": [float(100.0 * (int((p >= np.float32(t)).sum()) - int(y.sum())) / len(p)) for t in ts],
}
print(json.dumps(out))
