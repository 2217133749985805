#!/usr/bin/python3
"""Reference two-sample distances from scipy.stats (Debian python3-scipy).

Usage: metrics_sizes.py A_CSV B_CSV   (one value per line)
Prints JSON: ks = scipy.stats.ks_2samp(a, b).statistic, w1 = scipy.stats.wasserstein_distance(a, b).
"""
import json
import sys

import numpy as np
from scipy import stats


def main():
    a = np.loadtxt(sys.argv[1], ndmin=1)
    b = np.loadtxt(sys.argv[2], ndmin=1)
    print(json.dumps({"ks": float(stats.ks_2samp(a, b).statistic),
                      "w1": float(stats.wasserstein_distance(a, b))}))


if __name__ == "__main__":
    main()
