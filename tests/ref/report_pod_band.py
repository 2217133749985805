#!/usr/bin/python3
"""Pointwise 95 % confidence band of a hit/miss POD curve from statsmodels (Debian
python3-statsmodels): a binomial GLM of hit on ln(size) with the given link, and
GLMResults.get_prediction(...).conf_int(method="endpoint"), which forms the interval on the
linear-predictor scale and maps it through the inverse link.

Usage: report_pod_band.py CSV LINK SIZE...
CSV has a header "size_um,hit". Prints JSON: b0, b1, cov [[c00, c01], [c01, c11]] and for each SIZE
the predicted mean and the lower and upper band.
"""
import json
import sys

import numpy as np
import statsmodels.api as sm


def main():
    data = np.loadtxt(sys.argv[1], delimiter=",", skiprows=1, ndmin=2)
    link = sm.families.links.logit() if sys.argv[2] == "logit" else sm.families.links.probit()
    x = sm.add_constant(np.log(data[:, 0]))
    res = sm.GLM(data[:, 1], x, family=sm.families.Binomial(link=link)).fit(tol=1e-12, maxiter=200)
    sizes = np.array([float(s) for s in sys.argv[3:]])
    pred = res.get_prediction(sm.add_constant(np.log(sizes), has_constant="add"))
    ci = pred.conf_int(method="endpoint", alpha=0.05)
    out = {
        "b0": float(res.params[0]),
        "b1": float(res.params[1]),
        "cov": [[float(v) for v in row] for row in np.asarray(res.cov_params())],
        "points": [[float(s), float(m), float(c[0]), float(c[1])] for s, m, c in zip(sizes, pred.predicted_mean, ci)],
    }
    print(json.dumps(out))


if __name__ == "__main__":
    main()
