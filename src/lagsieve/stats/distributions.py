"""The distribution functions the screen needs, from ``scipy.special``.

``scipy.stats`` costs a job about 0.25 s of CPU to import (it brings ``scipy.optimize``,
``scipy.integrate``, ``scipy.sparse`` and more; measured with ``/usr/bin/time python -c``,
2-core machine: 1.15-1.3 s for numpy, pandas, scipy.linalg and scipy.stats against
0.89-0.99 s with scipy.special instead), and the screen's jobs need only the tails and
quantiles below, which ``scipy.stats`` itself computes with these special functions
(Student t: ``stdtr``/``stdtrit``; F: ``fdtrc``; normal: ``ndtr``/``ndtri``). Broadcasting
as numpy does.
"""
from __future__ import annotations

import numpy as np
from scipy import special

_INV_SQRT_2PI = 1.0 / np.sqrt(2.0 * np.pi)


def t_sf(x, df):
    """Upper tail P(T > x) of Student's t with ``df`` degrees of freedom."""
    return special.stdtr(df, -np.asarray(x, float))


def t_ppf(q, df):
    """The ``q`` quantile of Student's t with ``df`` degrees of freedom, for ``q`` in (0, 1)
    (nan at 0 and 1, where ``scipy.stats`` gives -inf and inf)."""
    return special.stdtrit(df, q)


def f_sf(x, dfn, dfd):
    """Upper tail P(F > x) of the F distribution with ``dfn`` and ``dfd`` degrees of freedom
    (1 below 0, as ``scipy.stats.f.sf``: a statistic a rounding error took below 0)."""
    x = np.asarray(x, float)
    return special.fdtrc(dfn, dfd, np.where(x < 0.0, 0.0, x))


def norm_cdf(z):
    """The standard normal distribution function."""
    return special.ndtr(z)


def norm_ppf(q):
    """The standard normal quantile function."""
    return special.ndtri(q)


def norm_pdf(z):
    """The standard normal density."""
    z = np.asarray(z, float)
    return _INV_SQRT_2PI * np.exp(-0.5 * z * z)
