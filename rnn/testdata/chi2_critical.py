# Upper critical values of the chi-square distribution, for the sampling
# frequency tests in decode_test.go: the x with P(X > x) = alpha for X ~ chi2(df).
# The CDF is the regularized lower incomplete gamma function P(df/2, x/2)
# (Abramowitz & Stegun 26.4.19), from torch.special.gammainc (Debian
# python3-torch); x is found by bisection to 1e-9.
# Run: /usr/bin/python3 chi2_critical.py > chi2_critical.json
import json
import torch

def critical(df, alpha):
    lo, hi = 0.0, 1000.0
    a = torch.tensor(df / 2, dtype=torch.float64)
    while hi - lo > 1e-9:
        mid = (lo + hi) / 2
        cdf = torch.special.gammainc(a, torch.tensor(mid / 2, dtype=torch.float64)).item()
        if 1 - cdf > alpha:
            lo = mid
        else:
            hi = mid
    return round((lo + hi) / 2, 6)

out = {"alpha": 0.001, "critical": {str(df): critical(df, 0.001) for df in (1, 3, 5, 7, 8)}}
print(json.dumps(out, indent=1))
