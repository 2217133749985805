#!/usr/bin/python3
"""Reference hit/miss POD fits from statsmodels (Debian python3-statsmodels).

Usage: metrics_pod.py CSV LINK
CSV has a header "size_um,hit" and one target per row. LINK is logit or probit.
Fits hit ~ 1 + ln(size_um) by maximum likelihood with statsmodels.api.Logit / Probit (Newton,
tight tolerance) and prints JSON: b0, b1, the covariance matrix (cov_params) and the
log-likelihood. Also prints Clopper-Pearson 95 % intervals from
statsmodels.stats.proportion.proportion_confint(method="beta") for each "k/n" given after LINK.
"""
import json
import sys

import numpy as np
import statsmodels.api as sm
from statsmodels.stats.proportion import proportion_confint


def main():
    data = np.loadtxt(sys.argv[1], delimiter=",", skiprows=1, ndmin=2)
    x = sm.add_constant(np.log(data[:, 0]))
    y = data[:, 1]
    model = sm.Logit(y, x) if sys.argv[2] == "logit" else sm.Probit(y, x)
    res = model.fit(method="newton", tol=1e-12, maxiter=200, disp=0)
    out = {
        "b0": float(res.params[0]),
        "b1": float(res.params[1]),
        "cov": [[float(v) for v in row] for row in np.asarray(res.cov_params())],
        "llf": float(res.llf),
        "cp": [],
    }
    for kn in sys.argv[3:]:
        k, n = map(int, kn.split("/"))
        lo, hi = proportion_confint(k, n, alpha=0.05, method="beta")
        out["cp"].append([float(lo), float(hi)])
    print(json.dumps(out))


if __name__ == "__main__":
    main()
