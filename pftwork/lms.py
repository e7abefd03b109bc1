"""The LMS (Box-Cox Cole-Green) distribution: z-scores, centiles and limits of normal.

Pure, vectorised numpy. Every function takes scalars or arrays that broadcast together and
returns a numpy float (scalar inputs) or a float64 array. ``L``, ``M`` and ``S`` are the
skewness (Box-Cox power), median and generalised coefficient of variation at the subject's
age, height and sex; ``M`` is the "predicted" value.

Notes
-----
Formulas (Cole & Green 1992; standards.md §1.1)::

    z       = ((y / M)**L - 1) / (L * S)          L != 0
            = ln(y / M) / S                       L == 0
    y(z)    = M * (1 + L * S * z)**(1 / L)        L != 0
            = M * exp(S * z)                      L == 0

``|L| < L_ZERO`` (1e-7) is treated as ``L == 0``. The centile ``y(z)`` is undefined where
``1 + L*S*z <= 0`` and is returned as nan there. The limits of normal use z = 1.645, the
constant printed with the GLI equations (the exact 5th-percentile quantile is 1.644854).
``z_score`` and ``value_at_z`` are computed as ``expm1(L*ln(y/M)) / (L*S)`` and
``M*exp(log1p(L*S*z) / L)``, algebraically the same as the forms above.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
from scipy.special import ndtr

__all__ = [
    "L_ZERO",
    "Z_LIMIT",
    "lower_limit",
    "percent_predicted",
    "percentile",
    "upper_limit",
    "value_at_z",
    "z_score",
]

ArrayLike = npt.ArrayLike
FloatArray = npt.NDArray[np.float64]

L_ZERO = 1e-7
"""``|L|`` below this is taken as ``L == 0`` (log-normal limit)."""

Z_LIMIT = 1.645
"""z of the lower (−) and upper (+) limit of normal: the 5th and 95th centiles as GLI prints them."""


def _f(x: ArrayLike) -> FloatArray:
    return np.asarray(x, dtype=np.float64)


def _out(x: FloatArray) -> FloatArray:
    return x[()] if x.ndim == 0 else x


def z_score(y: ArrayLike, L: ArrayLike, M: ArrayLike, S: ArrayLike) -> FloatArray:
    """z-score of a measured value under the LMS distribution.

    Parameters
    ----------
    y : array_like
        Measured value, in the unit of ``M``; nan gives nan, ``y <= 0`` gives nan
        except ``y == 0`` with ``L > 0``, which gives the limit ``-1/(L*S)``.
    L, M, S : array_like
        Box-Cox power, median (> 0) and coefficient of variation (> 0).

    Returns
    -------
    numpy.float64 or ndarray
        ``((y/M)**L - 1) / (L*S)``, or ``ln(y/M)/S`` where ``|L| < L_ZERO``.

    Examples
    --------
    >>> round(float(z_score(8.2, -0.1600954, 9.476500305, 0.11218624)), 6)
    -1.304701
    """
    y, L, M, S = _f(y), _f(L), _f(M), _f(S)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        r = np.asarray(np.log(y / M))
        z = np.multiply(L, r, out=np.empty(np.broadcast_shapes(r.shape, L.shape, S.shape)))
        np.expm1(z, out=z)
        z /= L * S
        small = np.abs(L) < L_ZERO
        if np.any(small):
            z = np.asarray(np.where(small, r / S, z))
    return _out(z)


def value_at_z(z: ArrayLike, L: ArrayLike, M: ArrayLike, S: ArrayLike) -> FloatArray:
    """Value at a given z (the centile curve), the inverse of :func:`z_score`.

    Parameters
    ----------
    z : array_like
        Standard normal deviate (e.g. -1.645 for the 5th centile).
    L, M, S : array_like
        Box-Cox power, median and coefficient of variation.

    Returns
    -------
    numpy.float64 or ndarray
        ``M * (1 + L*S*z)**(1/L)`` (``M*exp(S*z)`` where ``|L| < L_ZERO``); nan where
        ``1 + L*S*z <= 0``.

    Examples
    --------
    >>> round(float(value_at_z(-1.6448536269514722, -0.1600954, 9.476500305, 0.11218624)), 6)
    7.900755
    """
    z, L, M, S = _f(z), _f(L), _f(M), _f(S)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        w = np.multiply(L * S, z, out=np.empty(np.broadcast_shapes(z.shape, L.shape, M.shape, S.shape)))
        undefined = w <= -1.0
        np.log1p(w, out=w)
        w /= L
        small = np.abs(L) < L_ZERO
        if np.any(small):
            w = np.asarray(np.where(small, S * z, w))
        np.exp(w, out=w)
        w *= M
        if np.any(undefined):
            w = np.asarray(np.where(undefined & ~small, np.nan, w))
    return _out(w)


def lower_limit(L: ArrayLike, M: ArrayLike, S: ArrayLike, z: float = Z_LIMIT) -> FloatArray:
    """Lower limit of normal: the value at ``-z`` (default the 5th centile, z = 1.645).

    Examples
    --------
    >>> round(float(lower_limit(0.8, 3.5, 0.12)), 6)
    2.823318
    """
    return value_at_z(-_f(z), L, M, S)


def upper_limit(L: ArrayLike, M: ArrayLike, S: ArrayLike, z: float = Z_LIMIT) -> FloatArray:
    """Upper limit of normal: the value at ``+z`` (default the 95th centile, z = 1.645).

    Examples
    --------
    >>> round(float(upper_limit(0.8, 3.5, 0.12)), 6)
    4.204034
    """
    return value_at_z(_f(z), L, M, S)


def percentile(z: ArrayLike) -> FloatArray:
    """Percentile of a z-score, ``100 * Φ(z)`` (standard normal CDF, in %).

    Examples
    --------
    >>> round(float(percentile(-1.304701)), 4)
    9.5997
    """
    p = np.asarray(ndtr(_f(z)))
    p *= 100.0
    return _out(p)


def percent_predicted(y: ArrayLike, M: ArrayLike) -> FloatArray:
    """Measured value as a percentage of the predicted (median) value, ``100 * y / M``.

    Examples
    --------
    >>> float(percent_predicted(2.8, 3.5))
    80.0
    """
    p = np.asarray(_f(y) / _f(M))
    p *= 100.0
    return _out(p)
