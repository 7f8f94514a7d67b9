#!/usr/bin/python3
"""Exact reference values for weft's hidden Markov model tests.

Run with any Python 3 (standard library only):

    /usr/bin/python3 eval/testdata/hmm_reference.py > eval/testdata/hmm_reference.json

Everything is computed in exact rational arithmetic (fractions.Fraction)
straight from the definitions, by a different route from weft's scaled
float64 forward-backward:

- P(o) and the posteriors P(s_t = i | o) of short sequences by brute force,
  summing the joint probability P(o, s) of every one of the N^T state
  paths s (Rabiner 1989, eq. 17-18);
- the same for the 33-day diary, where 2^33 paths are too many, by the
  unscaled forward and backward recursions (Rabiner 1989, eq. 19-25) in
  exact arithmetic, which the brute force checks on the diary's first 14
  days;
- the Viterbi path and its probability by brute force over all paths.

The values are rounded to float64 only when written.
"""
import itertools
import json
from fractions import Fraction as F


def joint(pi, a, b, obs, path):
    p = pi[path[0]] * b[path[0]][obs[0]]
    for t in range(1, len(obs)):
        p *= a[path[t - 1]][path[t]] * b[path[t]][obs[t]]
    return p


def brute(pi, a, b, obs):
    """P(o), posteriors and the Viterbi path by summing over every path."""
    n, T = len(pi), len(obs)
    total = F(0)
    post = [[F(0)] * n for _ in range(T)]
    best, best_path = F(-1), None
    for path in itertools.product(range(n), repeat=T):
        p = joint(pi, a, b, obs, path)
        total += p
        for t, s in enumerate(path):
            post[t][s] += p
        if p > best:  # ties go to the first path in lexical order: the lower states
            best, best_path = p, path
    return total, [[x / total for x in row] for row in post], best, list(best_path)


def forward_backward(pi, a, b, obs):
    """P(o) and posteriors by the exact unscaled recursions."""
    n, T = len(pi), len(obs)
    alpha = [[pi[i] * b[i][obs[0]] for i in range(n)]]
    for t in range(1, T):
        alpha.append([sum(alpha[-1][i] * a[i][j] for i in range(n)) * b[j][obs[t]] for j in range(n)])
    beta = [[F(1)] * n]
    for t in range(T - 1, 0, -1):
        beta.insert(0, [sum(a[i][j] * b[j][obs[t]] * beta[0][j] for j in range(n)) for i in range(n)])
    total = sum(alpha[-1])
    return total, [[alpha[t][i] * beta[t][i] / total for i in range(n)] for t in range(T)], alpha


def fl(x):
    return float(x)


# Jurafsky & Martin, Speech and Language Processing, 3rd ed. draft,
# appendix A: the ice-cream HMM, states H (0) and C (1), observations
# 1, 2, 3 ice creams as symbols 0, 1, 2.
ice = dict(
    pi=[F(8, 10), F(2, 10)],
    a=[[F(6, 10), F(4, 10)], [F(5, 10), F(5, 10)]],
    b=[[F(2, 10), F(4, 10), F(4, 10)], [F(5, 10), F(4, 10), F(1, 10)]],
)
ice_obs = [2, 0, 2]

# The 33-day diary and starting parameters the Go test uses (its comment
# says where they come from); the stop probability, equal from both
# states, is dropped and the transitions renormalised to 8/9 and 1/9.
diary = [2, 3, 3, 2, 3, 2, 3, 2, 2, 3, 1, 3, 3, 1, 1, 1, 2, 1, 1, 1, 3, 1, 2, 1, 1, 1, 2, 3, 3, 2, 3, 2, 2]
diary_obs = [d - 1 for d in diary]
sheet = dict(
    pi=[F(1, 2), F(1, 2)],
    a=[[F(8, 9), F(1, 9)], [F(1, 9), F(8, 9)]],
    b=[[F(1, 10), F(2, 10), F(7, 10)], [F(7, 10), F(2, 10), F(1, 10)]],
)

out = {}

total, post, vbest, vpath = brute(ice["pi"], ice["a"], ice["b"], ice_obs)
total_fb, post_fb, alpha = forward_backward(ice["pi"], ice["a"], ice["b"], ice_obs)
assert total == total_fb and post == post_fb
out["ice_cream_313"] = {
    "probability": fl(total),
    "probability_exact": str(total),
    "alpha": [[fl(x) for x in row] for row in alpha],
    "posteriors": [[fl(x) for x in row] for row in post],
    "viterbi_path": vpath,
    "viterbi_probability": fl(vbest),
}

# The brute force checks the exact recursions on the diary's first 14 days
# (2^14 paths).
head = diary_obs[:14]
tb, pb, _, _ = brute(sheet["pi"], sheet["a"], sheet["b"], head)
tf, pf, _ = forward_backward(sheet["pi"], sheet["a"], sheet["b"], head)
assert tb == tf and pb == pf

total, post, _ = forward_backward(sheet["pi"], sheet["a"], sheet["b"], diary_obs)
out["diary_33"] = {
    "log_probability": __import__("math").log(total.numerator) - __import__("math").log(total.denominator),
    "posteriors_H": [fl(row[0]) for row in post],
}

print(json.dumps(out, indent=1))
