"""Group statistics for scalar measures: rank tests, effect sizes, false discovery rate."""

from __future__ import annotations

import numpy as np
from scipy import stats

__all__ = ["benjamini_hochberg", "compare_groups"]


def benjamini_hochberg(p):
    """Benjamini-Hochberg adjusted p-values (q-values); NaN stays NaN.

    Benjamini Y, Hochberg Y (1995). Controlling the false discovery rate. J R
    Stat Soc B 57:289-300.  q_(i) = min_{j >= i} p_(j) m / j, capped at 1.

    Examples
    --------
    >>> benjamini_hochberg([0.01, 0.04, 0.03, 0.5]).round(4).tolist()
    [0.04, 0.0533, 0.0533, 0.5]
    """
    p = np.asarray(p, float)
    q = np.full(p.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(p))
    m = len(ok)
    if m == 0:
        return q
    order = ok[np.argsort(p[ok], kind="stable")]
    ranked = p[order] * m / np.arange(1, m + 1)
    q[order] = np.minimum(1.0, np.minimum.accumulate(ranked[::-1])[::-1])
    return q


def compare_groups(values, groups):
    """Rank test and effect size of one measure across groups.

    Two groups: Mann-Whitney U (two-sided) with the rank-biserial
    correlation r = 2 U_1 / (n1 n2) - 1 (Kerby 2014, Compr Psychol 3:11) as
    effect size, positive when the first group (sorted by name) tends to be
    larger.  More groups: Kruskal-Wallis H with epsilon-squared
    H / (n - 1) (Tomczak & Tomczak 2014, Trends Sport Sci 21:19).

    Returns
    -------
    dict
        test, statistic, p, effect_size, effect_name and per-group n, mean,
        sd, median.  p is NaN when a test is impossible (a constant measure,
        a group with fewer than two values).
    """
    values = np.asarray(values, float)
    groups = np.asarray(groups).astype(str)
    names = sorted(set(groups))
    by = {g: values[(groups == g) & np.isfinite(values)] for g in names}
    out = {"groups": {g: {"n": int(len(v)),
                          "mean": float(np.mean(v)) if len(v) else float("nan"),
                          "sd": float(np.std(v, ddof=1)) if len(v) > 1 else float("nan"),
                          "median": float(np.median(v)) if len(v) else float("nan")}
                      for g, v in by.items()}}
    samples = [v for v in by.values()]
    finite = np.concatenate(samples) if samples else np.zeros(0)
    usable = len(names) >= 2 and all(len(v) >= 2 for v in samples) and np.ptp(finite) > 0
    if len(names) == 2:
        out.update(test="Mann-Whitney U", effect_name="rank-biserial r")
        if usable:
            a, b = samples
            res = stats.mannwhitneyu(a, b, alternative="two-sided")
            out.update(statistic=float(res.statistic), p=float(res.pvalue),
                       effect_size=float(2 * res.statistic / (len(a) * len(b)) - 1))
        else:
            out.update(statistic=float("nan"), p=float("nan"), effect_size=float("nan"))
    else:
        out.update(test="Kruskal-Wallis H", effect_name="epsilon-squared")
        if usable:
            res = stats.kruskal(*samples)
            n = sum(len(v) for v in samples)
            out.update(statistic=float(res.statistic), p=float(res.pvalue),
                       effect_size=float(res.statistic / (n - 1)))
        else:
            out.update(statistic=float("nan"), p=float("nan"), effect_size=float("nan"))
    return out
