#!/usr/bin/python3
"""One-sided 95 % lower likelihood-ratio (profile-likelihood) bound of a hit/miss POD curve, from
statsmodels and scipy (Debian python3-statsmodels, python3-scipy), independent of porebench's
Newton code.

Usage: report_pod_band.py CSV LINK SIZE...
CSV has a header "size_um,hit". LINK is logit or probit. The model is a binomial GLM of hit on
ln(size). At each SIZE (x0 = ln SIZE) the linear predictor is re-parametrised as
eta_i = e + b1 (x_i - x0): for a fixed e, statsmodels fits b1 alone (GLM without constant, with
offset e); the lower bound of e is where the deviance rise 2 (llf_max - llf(e)) reaches
chi2_1(0.90) (scipy.stats.chi2.ppf(0.90, 1) = 2.7055), found by scipy.optimize.brentq below the
fitted e. Prints JSON: b0, b1 and for each SIZE [size, fitted POD, lower bound of POD].
"""
import json
import sys

import numpy as np
import statsmodels.api as sm
from scipy import optimize, stats


def main():
    data = np.loadtxt(sys.argv[1], delimiter=",", skiprows=1, ndmin=2)
    link = sm.families.links.logit() if sys.argv[2] == "logit" else sm.families.links.probit()
    family = sm.families.Binomial(link=link)
    x = np.log(data[:, 0])
    y = data[:, 1]
    full = sm.GLM(y, sm.add_constant(x), family=family).fit(tol=1e-12, maxiter=200)
    llmax = full.llf
    b0, b1 = float(full.params[0]), float(full.params[1])
    crit = stats.chi2.ppf(0.90, 1)
    points = []
    for s in [float(v) for v in sys.argv[3:]]:
        x0 = np.log(s)
        z = (x - x0).reshape(-1, 1)

        def rise(e):
            r = sm.GLM(y, z, family=family, offset=np.full(len(y), e)).fit(tol=1e-12, maxiter=200)
            return 2 * (llmax - r.llf) - crit

        e_hat = b0 + b1 * x0
        step = 0.5
        lo = e_hat - step
        while rise(lo) < 0:
            step *= 1.5
            lo = e_hat - step
        e_lo = optimize.brentq(rise, lo, e_hat, xtol=1e-12)
        points.append([s, float(link.inverse(np.array([e_hat]))[0]), float(link.inverse(np.array([e_lo]))[0])])
    print(json.dumps({"b0": b0, "b1": b1, "points": points}))


if __name__ == "__main__":
    main()
