"""The few distribution functions the analysis needs, from ``scipy.special``.

``scipy.stats`` builds every distribution object on import (about 1.5 s here), while the
audit needs four functions; these are the same special functions ``scipy.stats`` itself
evaluates for them (``chi2.ppf`` is ``2 gammaincinv(df / 2, q)``, ``chi2.sf`` is
``chdtrc``, ``f.ppf`` is ``fdtri``, ``norm.ppf`` is ``ndtri``), so the values are the same
to the last digit; ``tests/test_distributions.py`` checks that against ``scipy.stats``.
"""
from __future__ import annotations

import scipy.special as sc


def norm_ppf(q: float) -> float:
    """Quantile of the standard normal distribution."""
    return float(sc.ndtri(q))


def chi2_ppf(q: float, df: float) -> float:
    """Quantile of the chi-squared distribution with ``df`` degrees of freedom."""
    return float(2.0 * sc.gammaincinv(df / 2.0, q))


def chi2_sf(x: float, df: float) -> float:
    """Upper tail probability P(X > x) of the chi-squared distribution."""
    return float(sc.chdtrc(df, x))


def f_ppf(q: float, dfn: float, dfd: float) -> float:
    """Quantile of the F distribution with ``dfn`` and ``dfd`` degrees of freedom."""
    return float(sc.fdtri(dfn, dfd, q))
