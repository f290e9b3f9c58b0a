"""Walker's alias method for O(1) discrete sampling (light selection).

A. J. Walker, "An Efficient Method for Generating Discrete Random Variables
with General Distributions", ACM TOMS 3(3), 1977; built with the numerically
stable construction of M. D. Vose, "A Linear Algorithm for Generating Random
Numbers with a Given Distribution", IEEE TSE 17(9), 1991.

``build_alias`` (Python, numpy) turns a pmf into two arrays; ``alias_select``
(kernel helper) draws an index from one uniform number u in [0, 1): the cell
i = floor(u n), then the fractional part f = u n - i decides between i
(f < prob[i]) and alias[i].  The pmf itself is kept beside the table, and the
estimators divide by it (``alias_pmf`` reconstructs the table's own pmf for
tests: it equals the input to float64 rounding).
"""
from __future__ import annotations

import numpy as np

from .._jit import inline


def build_alias(pmf) -> tuple[np.ndarray, np.ndarray]:
    """(prob float64 (n,), alias int32 (n,)) of a pmf (non-negative, sum > 0).

    An empty pmf gives empty arrays.
    """
    p = np.asarray(pmf, dtype=np.float64)
    n = p.shape[0]
    prob = np.ones(n)
    alias = np.arange(n, dtype=np.int32)
    if n == 0:
        return prob, alias
    total = p.sum()
    if not (total > 0.0) or (p < 0).any() or not np.isfinite(p).all():
        raise ValueError("alias table: pmf must be finite, non-negative, with a positive sum")
    scaled = p * (n / total)
    small = [i for i in range(n) if scaled[i] < 1.0]
    large = [i for i in range(n) if scaled[i] >= 1.0]
    while small and large:
        s = small.pop()
        l = large.pop()
        prob[s] = scaled[s]
        alias[s] = l
        scaled[l] = (scaled[l] + scaled[s]) - 1.0
        if scaled[l] < 1.0:
            small.append(l)
        else:
            large.append(l)
    # what remains is 1 up to rounding (Vose 1991)
    for i in large + small:
        prob[i] = 1.0
        alias[i] = i
    return prob, alias


def alias_pmf(prob: np.ndarray, alias: np.ndarray) -> np.ndarray:
    """The distribution an alias table actually samples (for tests)."""
    n = prob.shape[0]
    out = prob.copy()
    np.add.at(out, alias, 1.0 - prob)
    return out / n


@inline
def alias_select(prob, alias, u):
    """Index drawn from the alias table with one uniform u in [0, 1).

    Probability of i: alias_pmf(prob, alias)[i].
    """
    n = prob.shape[0]
    x = u * n
    i = int(x)
    if i >= n:
        i = n - 1
    f = x - i
    if f < prob[i]:
        return i
    return alias[i]
