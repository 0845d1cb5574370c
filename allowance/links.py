"""Link functions of binary-response models: probit (standard normal) and logit (logistic).

A link maps a probability to the real line; a satellite model shifts a PD along it. The
standard normal functions are also the Vasicek model's (:mod:`allowance.scenarios`).

Implements
----------
norm_cdf, norm_ppf        Φ and Φ⁻¹, full relative accuracy in the lower tail
logistic_cdf, logit       the logistic function and its inverse
Link                      a named pair (cdf, ppf)
LINKS                     ``"probit"`` / ``"logit"`` -> Link
shift_probability         F(F⁻¹(p) + shift), exact where the shift is 0
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from statistics import NormalDist

import numpy as np

from allowance.schemas import Link as LinkName
from allowance.exceptions import InvalidInputError

__all__ = ["LINKS", "Link", "logistic_cdf", "logit", "norm_cdf", "norm_ppf", "shift_probability"]

_STANDARD_NORMAL = NormalDist()


def _elementwise(func: Callable[[float], float], x: np.ndarray) -> np.ndarray:
    """Apply a scalar function over an array, once per distinct value (tables repeat a lot)."""
    flat = np.asarray(x, dtype=float).ravel()
    uniq, inverse = np.unique(flat, return_inverse=True)
    out = np.fromiter((func(float(v)) for v in uniq), dtype=float, count=len(uniq))
    return out[inverse].reshape(np.shape(x))


def _phi(x: float) -> float:
    # erfc, not 1 + erf (as NormalDist.cdf does): keeps full relative accuracy in the lower tail
    return 0.5 * math.erfc(-x / math.sqrt(2.0))


def norm_cdf(x) -> np.ndarray:
    """Standard normal CDF Φ, elementwise.

    Examples
    --------
    >>> float(norm_cdf(-1.0).round(10))   # scipy.stats.norm.cdf(-1) = 0.1586552539
    0.1586552539
    """
    return _elementwise(_phi, x)


def norm_ppf(p) -> np.ndarray:
    """Standard normal quantile Φ⁻¹, elementwise; every p must lie inside (0, 1).

    NormalDist.inv_cdf is Wichura's algorithm AS241 (about 1e-16 relative).

    Examples
    --------
    >>> float(norm_ppf(0.975).round(10))  # scipy.stats.norm.ppf(0.975) = 1.9599639845
    1.9599639845
    """
    return _elementwise(_STANDARD_NORMAL.inv_cdf, p)


def logistic_cdf(x) -> np.ndarray:
    r"""The logistic function :math:`1 / (1 + e^{-x})`, stable for large |x|.

    Examples
    --------
    >>> logistic_cdf([0.0, -800.0]).tolist()
    [0.5, 0.0]
    """
    x = np.asarray(x, dtype=float)
    e = np.exp(-np.abs(x))
    return np.where(x >= 0.0, 1.0 / (1.0 + e), e / (1.0 + e))


def logit(p) -> np.ndarray:
    r"""The log-odds :math:`\ln p - \ln(1 - p)`; every p must lie inside (0, 1).

    Examples
    --------
    >>> float(logit(0.5)), round(float(logit(0.2)), 10)   # ln(0.25) = -1.3862943611
    (0.0, -1.3862943611)
    """
    p = np.asarray(p, dtype=float)
    return np.log(p) - np.log1p(-p)


@dataclass(frozen=True)
class Link:
    """A link function: ``ppf`` maps a probability to the real line, ``cdf`` maps it back."""

    name: str
    cdf: Callable[[np.ndarray], np.ndarray]
    ppf: Callable[[np.ndarray], np.ndarray]


#: The links a satellite model may state.
LINKS: dict[LinkName, Link] = {
    "probit": Link("probit", norm_cdf, norm_ppf),
    "logit": Link("logit", logistic_cdf, logit),
}


def shift_probability(p, shift, link: LinkName) -> np.ndarray:
    r"""Shift probabilities along a link: :math:`F(F^{-1}(p) + s)`.

    Broadcasts ``p`` against ``shift``. Where the shift is exactly 0 the probability is
    returned unchanged (bit for bit, not through a round trip of F and F⁻¹); 0 and 1 map to
    themselves whatever the shift.

    Parameters
    ----------
    p : array_like
        Probabilities in [0, 1].
    shift : array_like
        The shift on the link scale.
    link : {"probit", "logit"}

    Notes
    -----
    Probit: :math:`F = \Phi`; logit: :math:`F(x) = 1 / (1 + e^{-x})`. The shifted
    probability is increasing in the shift and in p, and stays inside (0, 1) for p inside.

    References
    ----------
    .. [1] McCullagh, P. and Nelder, J. A. (1989). *Generalized Linear Models*, 2nd ed.,
       Chapman and Hall, section 4.3 (link functions for binary data).

    Examples
    --------
    >>> shift_probability(0.02, 0.0, "probit").tolist()
    0.02
    >>> round(float(shift_probability(0.02, 0.5, "probit")), 6)  # scipy.stats.norm: 0.0601221607
    0.060122
    >>> round(float(shift_probability(0.2, np.log(2.0), "logit")), 10)  # odds 0.25 doubled: 1/3
    0.3333333333
    """
    p = np.asarray(p, dtype=float)
    shift = np.asarray(shift, dtype=float)
    if not np.all((p >= 0.0) & (p <= 1.0)):
        raise InvalidInputError("shift_probability: every probability must be in [0, 1] (no NaN)")
    if not np.all(np.isfinite(shift)):
        raise InvalidInputError("shift_probability: every shift must be finite")
    p, shift = np.broadcast_arrays(p, shift)
    moved = (shift != 0.0) & (p > 0.0) & (p < 1.0)
    out = p.copy()
    if moved.any():
        f = LINKS[link]
        out[moved] = f.cdf(f.ppf(p[moved]) + shift[moved])
    return out[()]
