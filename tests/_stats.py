"""Shared statistics for the sampler tests."""
import numpy as np
from scipy import stats


def pooled_chi2_pvalue(observed, expected):
    """Pearson chi-square p-value after pooling the lowest-expectation bins until every
    pooled bin has E >= 5 (the usual rule, Pearson's chi-square with expected counts >= 5, common practice); expected counts
    are rescaled to the observed total (normalisation is tested separately).
    scipy.stats.chi2 is the reference distribution.  Returns (p, pooled bins)."""
    observed = np.asarray(observed, float).ravel()
    expected = np.asarray(expected, float).ravel()
    po, pe, ao, ae = [], [], 0.0, 0.0
    for i in np.argsort(expected):
        ao += observed[i]
        ae += expected[i]
        if ae >= 5.0:
            po.append(ao)
            pe.append(ae)
            ao = ae = 0.0
    if ao > 0 or ae > 0:
        po[-1] += ao
        pe[-1] += ae
    po, pe = np.array(po), np.array(pe)
    pe *= po.sum() / pe.sum()
    chi2 = float(((po - pe) ** 2 / pe).sum())
    return float(stats.chi2.sf(chi2, len(po) - 1)), len(po)
