"""Input checks shared by the state-space modules (private).

Every public function of ``embedding``, ``mutual_information``, ``dimension``,
``recurrence`` and ``pca`` converts its input through these helpers, so that
short, constant, NaN-containing or multichannel input gives the same clear
:class:`~echoreo.errors.ScoringInputError` everywhere instead of a crash deep
inside numpy or scipy.
"""

from __future__ import annotations

import numpy as np

from echoreo.errors import ScoringInputError

__all__ = ["as_points", "as_series", "check_positive_int", "require_not_constant"]


def check_positive_int(value: object, name: str, minimum: int = 1) -> int:
    """Return ``value`` as an int, or raise if it is not an integer ``>= minimum``."""
    if isinstance(value, bool) or not isinstance(value, int | np.integer):
        raise ScoringInputError(
            f"{name} must be an integer of at least {minimum}; got {value!r} "
            f"({type(value).__name__})"
        )
    if value < minimum:
        raise ScoringInputError(f"{name} must be at least {minimum}; got {value}")
    return int(value)


def _report_nonfinite(values: np.ndarray, what: str) -> None:
    bad = ~np.isfinite(values)
    if bad.any():
        first = int(np.flatnonzero(bad.reshape(bad.shape[0], -1).any(axis=1))[0])
        raise ScoringInputError(
            f"{what} contains {int(bad.sum())} NaN or infinite value(s), the first at "
            f"sample {first} of {values.shape[0]}",
            hint="interpolate short gaps or cut the series at the gap before scoring",
        )


def as_series(x: object, what: str = "the series") -> np.ndarray:
    """Return ``x`` as a finite one-dimensional float array.

    Parameters
    ----------
    x : array_like, shape (n,) or (n, 1)
        The measured series. A single column is accepted and flattened.
    what : str
        How to name the input in messages.

    Returns
    -------
    ndarray, shape (n,), float64
        ``x`` itself when it already is a contiguous float64 vector (no copy),
        so that :func:`~echoreo.scoring.embed` can return a view of the caller's data.

    Raises
    ------
    ScoringInputError
        For empty, multichannel, non-numeric or non-finite input.
    """
    try:
        arr = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ScoringInputError(f"{what} must be numeric; got {type(x).__name__}") from exc
    if arr.ndim == 2 and arr.shape[1] == 1:
        arr = arr[:, 0]
    if arr.ndim == 2:
        raise ScoringInputError(
            f"{what} must have one channel; got shape {arr.shape} ({arr.shape[1]} channels)",
            hint="select one channel, its norm or its first principal component first",
        )
    if arr.ndim != 1:
        raise ScoringInputError(f"{what} must be one-dimensional; got shape {arr.shape}")
    if arr.size == 0:
        raise ScoringInputError(f"{what} is empty")
    _report_nonfinite(arr, what)
    return arr


def as_points(x: object, what: str = "the embedded array") -> np.ndarray:
    """Return ``x`` as a finite two-dimensional float array of state vectors.

    Parameters
    ----------
    x : array_like, shape (n, m) or (n,)
        State vectors, one per row; a vector is read as ``m = 1``.
    what : str
        How to name the input in messages.

    Returns
    -------
    ndarray, shape (n, m), float64
    """
    try:
        arr = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ScoringInputError(f"{what} must be numeric; got {type(x).__name__}") from exc
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2:
        raise ScoringInputError(f"{what} must have shape (n, m); got shape {arr.shape}")
    if arr.shape[0] == 0 or arr.shape[1] == 0:
        raise ScoringInputError(f"{what} is empty (shape {arr.shape})")
    _report_nonfinite(arr, what)
    return arr


def require_not_constant(x: np.ndarray, what: str = "the series") -> None:
    """Raise if the series has no variation (every estimator here would divide by zero)."""
    if np.ptp(x) == 0.0:
        raise ScoringInputError(
            f"{what} is constant (every one of its {x.shape[0]} samples equals {x.flat[0]:g}); "
            "its delay and dimension are undefined",
            hint="check that the sensor was recording and the participant moved",
        )
