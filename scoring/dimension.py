"""Embedding dimension: false nearest neighbours (Kennel et al. 1992) and Cao's E1/E2 (Cao 1997)."""

from __future__ import annotations

import math
from typing import Literal, NamedTuple

import numpy as np
from numba import njit

from echoreo.errors import ScoringInputError
from echoreo.scoring._checks import as_series, check_positive_int, require_not_constant
from echoreo.scoring._neighbours import nearest_other
from echoreo.scoring.embedding import embed

__all__ = ["CaoResult", "cao", "choose_dimension", "fnn"]

#: Fewest delay vectors the largest tested dimension must still have.
MIN_VECTORS = 10

#: Default FNN threshold of choose_dimension: the first dimension whose fraction
#: of false neighbours is below 1 %. Kennel et al. (1992) read the dimension off
#: where the fraction "drops to zero"; 1 % is our operational reading of that.
FNN_THRESHOLD = 0.01

#: Default Cao threshold of choose_dimension: the first d with E1(d) >= 0.7.
#: Cao (1997) takes the dimension where E1 "stops changing" (saturates near 1)
#: without giving a number. 0.7 lies midway between the levels we computed for
#: Lorenz x (delay 0.08-0.2 s, n = 3,000-50,000): E1(2) <= 0.52 and E1(3) = 0.72-0.92;
#: a level of 0.9 would often call the Lorenz attractor four-dimensional.
CAO_THRESHOLD = 0.7


class CaoResult(NamedTuple):
    """Cao's statistics for d = 1, ..., max_dim - 1 (unpacks as ``E1, E2``)."""

    E1: np.ndarray
    E2: np.ndarray


def _prepare(x: object, delay: object, max_dim: object) -> tuple[np.ndarray, int, int]:
    series = as_series(x)
    delay = check_positive_int(delay, "delay")
    max_dim = check_positive_int(max_dim, "max_dim", minimum=2)
    n = series.shape[0]
    needed = max_dim * delay + MIN_VECTORS
    if n < needed:
        raise ScoringInputError(
            f"a series of {n} samples is too short to test dimensions up to {max_dim} with "
            f"delay {delay}: at least {needed} samples are needed "
            f"(max_dim * delay + {MIN_VECTORS} delay vectors)",
            hint="use a smaller max_dim or delay, or a longer series",
        )
    require_not_constant(series)
    return series, delay, max_dim


def fnn(x: object, delay: int, max_dim: int = 10, rtol: float = 15.0,
        atol: float = 2.0) -> np.ndarray:
    r"""Fraction of false nearest neighbours for dimensions 1 to ``max_dim``.

    For dimension :math:`d`, every delay vector :math:`\mathbf{y}_i(d)`,
    :math:`i < N_d = n - d\tau`, gets its Euclidean nearest neighbour
    :math:`\mathbf{y}_{j}(d)` (itself excluded) at distance :math:`R_d(i)`. The
    neighbour is false when adding the :math:`(d+1)`-th coordinate separates the
    two by either criterion of Kennel, Brown & Abarbanel (1992):

    .. math::

        \frac{|x_{i+d\tau} - x_{j+d\tau}|}{R_d(i)} > R_{tol}
        \quad\text{or}\quad
        \frac{R_{d+1}(i)}{R_A} > A_{tol},
        \qquad R_{d+1}^2 = R_d^2 + (x_{i+d\tau} - x_{j+d\tau})^2,

    with :math:`R_A` the standard deviation of the series. The result is the
    fraction of false neighbours among the :math:`N_d` vectors. Neighbour search:
    exact box-assisted search per dimension (Grassberger 1990; Schreiber 1995; see
    ``echoreo.scoring._neighbours``), a k-d tree where boxes do not pay.

    Parameters
    ----------
    x : array_like, shape (n,) or (n, 1)
        The scalar series.
    delay : int
        Embedding delay :math:`\tau`, in samples.
    max_dim : int, default 10
        Largest dimension tested (at least 2).
    rtol : float, default 15.0
        :math:`R_{tol}`; Kennel et al. (1992) use 15.
    atol : float, default 2.0
        :math:`A_{tol}`; Kennel et al. (1992) use 2.

    Returns
    -------
    ndarray, shape (max_dim,)
        Fractions (0 to 1) for :math:`d = 1, \dots,` ``max_dim``.

    Raises
    ------
    ScoringInputError
        For constant, multichannel or NaN-containing input, or fewer than
        ``max_dim * delay + 10`` samples.

    References
    ----------
    M. B. Kennel, R. Brown and H. D. I. Abarbanel (1992). Determining embedding
    dimension for phase-space reconstruction using a geometrical construction.
    *Physical Review A* 45(6):3403-3411.
    """
    series, delay, max_dim = _prepare(x, delay, max_dim)
    r_a = float(np.std(series))
    return np.array([_fnn_fraction(series, delay, d, rtol, atol, r_a)
                     for d in range(1, max_dim + 1)])


def _is_false(series: np.ndarray, shift: int, rows: np.ndarray, nb: np.ndarray,
              r_d: np.ndarray, rtol: float, atol: float, r_a: float) -> np.ndarray:
    """Kennel et al.'s two criteria (see :func:`fnn`) for the vectors ``rows`` (k,)."""
    gap = np.abs(series[rows + shift] - series[nb + shift])
    return (gap > rtol * r_d) | (np.sqrt(r_d * r_d + gap * gap) > atol * r_a)


@njit(cache=True, nogil=True)
def _count_false(series, shift, rows, nb, r_d, rtol, limit):  # pragma: no cover - compiled
    """How many of the vectors ``rows`` (k,) have a false neighbour: :func:`_is_false`
    with ``limit`` = atol * R_A, in one pass."""
    false = 0
    for i in rows:
        gap = abs(series[i + shift] - series[nb[i] + shift])
        r = r_d[i]
        if gap > rtol * r or math.sqrt(r * r + gap * gap) > limit:
            false += 1
    return false


def _fnn_fraction(series: np.ndarray, delay: int, d: int, rtol: float, atol: float,
                  r_a: float, level: float | None = None) -> float | None:
    """Fraction of false nearest neighbours at dimension d (see :func:`fnn`).

    With ``level``, None as soon as the false neighbours found make up at least that
    fraction of all ``n - d * delay`` vectors: the fraction is then known to be at
    least ``level`` without searching the remaining neighbours.
    """
    count = series.shape[0] - d * delay
    points = embed(series, d, delay)[:count]
    shift = d * delay
    stop = None
    if level is not None:
        limit = level * count
        found = [0]

        def stop(rows: np.ndarray, nb: np.ndarray, r_d: np.ndarray) -> bool:
            found[0] += _count_false(series, shift, rows, nb, r_d, rtol, atol * r_a)
            return found[0] >= limit

    answer = nearest_other(points, p=2.0, nonzero=False, stop=stop)
    if answer is None:
        return None
    nb, r_d = answer
    return np.count_nonzero(_is_false(series, shift, np.arange(count), nb, r_d,
                                      rtol, atol, r_a)) / count


def _cao_e(series: np.ndarray, delay: int, d: int) -> tuple[float, float]:
    """Cao's E(d) and E*(d) (see :func:`cao`)."""
    count = series.shape[0] - d * delay
    points = embed(series, d, delay)[:count]
    nb, r_d = nearest_other(points, p=np.inf, nonzero=True)
    keep = nb >= 0
    if not keep.any():
        raise ScoringInputError(
            f"every delay vector of dimension {d} is identical to all others; "
            "Cao's statistics are undefined"
        )
    own = np.flatnonzero(keep)
    gap = np.abs(series[own + d * delay] - series[nb[keep] + d * delay])
    # In the maximum norm the (d+1)-distance is max(R_d, |new coordinate gap|).
    e = float(np.mean(np.maximum(r_d[keep], gap) / r_d[keep]))
    return e, float(np.mean(gap))


def cao(x: object, delay: int, max_dim: int = 10) -> CaoResult:
    r"""Cao's statistics E1 and E2 for dimensions 1 to ``max_dim - 1``.

    For dimension :math:`d`, every delay vector :math:`\mathbf{y}_i(d)`,
    :math:`i < N_d = n - d\tau`, gets its nearest neighbour
    :math:`\mathbf{y}_{n(i,d)}(d)` in the maximum norm (itself and identical
    vectors excluded, as Cao prescribes). Then

    .. math::

        a(i,d) = \frac{\|\mathbf{y}_i(d+1) - \mathbf{y}_{n(i,d)}(d+1)\|_\infty}
                      {\|\mathbf{y}_i(d) - \mathbf{y}_{n(i,d)}(d)\|_\infty},
        \qquad
        E(d) = \frac{1}{N_d}\sum_i a(i,d),
        \qquad
        E^*(d) = \frac{1}{N_d}\sum_i |x_{i+d\tau} - x_{n(i,d)+d\tau}|,

    .. math::

        E_1(d) = \frac{E(d+1)}{E(d)}, \qquad E_2(d) = \frac{E^*(d+1)}{E^*(d)}.

    :math:`E_1` saturates near 1 from the minimal embedding dimension on;
    :math:`E_2` stays near 1 for every :math:`d` for a random series, and departs
    from 1 for some :math:`d` for a deterministic one (Cao 1997).

    Parameters
    ----------
    x : array_like, shape (n,) or (n, 1)
        The scalar series.
    delay : int
        Embedding delay :math:`\tau`, in samples.
    max_dim : int, default 10
        :math:`E(d)` is computed for :math:`d = 1, \dots,` ``max_dim``, hence
        :math:`E_1`, :math:`E_2` for :math:`d = 1, \dots,` ``max_dim - 1``.

    Returns
    -------
    CaoResult
        ``(E1, E2)``, each ndarray of shape (max_dim - 1,), dimensionless;
        element ``d - 1`` belongs to dimension ``d``.

    Raises
    ------
    ScoringInputError
        For constant, multichannel or NaN-containing input, or fewer than
        ``max_dim * delay + 10`` samples.

    References
    ----------
    L. Cao (1997). Practical method for determining the minimum embedding
    dimension of a scalar time series. *Physica D* 110(1-2):43-50.
    """
    series, delay, max_dim = _prepare(x, delay, max_dim)
    values = np.array([_cao_e(series, delay, d) for d in range(1, max_dim + 1)])
    e, e_star = values[:, 0], values[:, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        e2 = np.where(e_star[:-1] > 0, e_star[1:] / np.where(e_star[:-1] > 0, e_star[:-1], 1.0),
                      np.nan)
    return CaoResult(E1=e[1:] / e[:-1], E2=e2)


def choose_dimension(x: object, delay: int, method: Literal["fnn", "cao"] = "fnn", *,
                     max_dim: int = 10, threshold: float | None = None) -> int:
    r"""Minimal embedding dimension by false nearest neighbours or by Cao's E1.

    ``method="fnn"``: the smallest :math:`d` whose fraction of false nearest
    neighbours (:func:`fnn`, Kennel et al. 1992) is below ``threshold``
    (default 0.01); when none is, the :math:`d` of the smallest fraction.

    ``method="cao"``: the smallest :math:`d` with :math:`E_1(d) \ge` ``threshold``
    (default 0.7), i.e. where :math:`E_1` has saturated near 1 (Cao 1997); when
    none does, ``max_dim``.

    Both thresholds are our operational readings of the papers, which describe
    the criterion ("drops to zero", "stops changing") without a number.
    With ``method="fnn"`` a dimension's neighbour search ends once the false
    neighbours found reach ``threshold`` of all vectors (its fraction cannot then
    fall below it); the answer equals the rule applied to :func:`fnn`'s curve.
    When the series is too short for ``max_dim``, ``max_dim`` is lowered to the
    largest testable value (documented fallback); fewer than 2 testable
    dimensions raise.

    Parameters
    ----------
    x : array_like, shape (n,) or (n, 1)
        The scalar series.
    delay : int
        Embedding delay, in samples (e.g. from :func:`choose_delay`).
    method : {"fnn", "cao"}
        Criterion.
    max_dim : int, default 10
        Largest dimension considered.
    threshold : float, optional
        FNN fraction (default 0.01) or Cao E1 level (default 0.7).

    Returns
    -------
    int
        The embedding dimension, ``1 <= dim <= max_dim``.

    References
    ----------
    M. B. Kennel, R. Brown and H. D. I. Abarbanel (1992). Determining embedding
    dimension for phase-space reconstruction using a geometrical construction.
    *Physical Review A* 45(6):3403-3411.

    L. Cao (1997). Practical method for determining the minimum embedding
    dimension of a scalar time series. *Physica D* 110(1-2):43-50.
    """
    series = as_series(x)
    delay = check_positive_int(delay, "delay")
    max_dim = check_positive_int(max_dim, "max_dim", minimum=2)
    testable = (series.shape[0] - MIN_VECTORS) // delay
    if testable < 2:
        raise ScoringInputError(
            f"a series of {series.shape[0]} samples is too short to choose a dimension with "
            f"delay {delay}: at least {2 * delay + MIN_VECTORS} samples are needed",
            hint="use a smaller delay or a longer series",
        )
    max_dim = min(max_dim, testable)
    # Dimensions are evaluated in increasing order and the search stops at the first
    # that meets the criterion; the result equals that of the full fnn()/cao() curves.
    series, delay, max_dim = _prepare(series, delay, max_dim)
    if method == "fnn":
        level = FNN_THRESHOLD if threshold is None else float(threshold)
        r_a = float(np.std(series))
        # A dimension's search ends as soon as its false neighbours reach the level;
        # only when no dimension falls below it are the full fractions needed.
        fractions = []
        for d in range(1, max_dim + 1):
            fractions.append(_fnn_fraction(series, delay, d, 15.0, 2.0, r_a, level))
            if fractions[-1] is not None and fractions[-1] < level:
                return d
        fractions = [_fnn_fraction(series, delay, d, 15.0, 2.0, r_a) if f is None else f
                     for d, f in enumerate(fractions, start=1)]
        return int(np.argmin(fractions)) + 1
    if method == "cao":
        level = CAO_THRESHOLD if threshold is None else float(threshold)
        previous = _cao_e(series, delay, 1)[0]
        for d in range(1, max_dim):
            current = _cao_e(series, delay, d + 1)[0]
            if current / previous >= level:
                return d
            previous = current
        return max_dim
    raise ScoringInputError(f"method must be 'fnn' or 'cao'; got {method!r}")
