"""Uniform time-delay embedding (Takens 1981) as a strided, read-only view."""

from __future__ import annotations

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from echoreo.errors import ScoringInputError
from echoreo.scoring._checks import as_series, check_positive_int

__all__ = ["embed", "embedding_length"]


def embedding_length(n: int, dim: int, delay: int) -> int:
    """Number of delay vectors a series of ``n`` samples gives: ``n - (dim - 1) * delay``."""
    return n - (dim - 1) * delay


def embed(x: object, dim: int, delay: int) -> np.ndarray:
    r"""Uniform time-delay embedding of a scalar series.

    Row :math:`i` of the result is the delay vector

    .. math::

        \mathbf{y}_i = \bigl(x_i,\; x_{i+\tau},\; \dots,\; x_{i+(m-1)\tau}\bigr),
        \qquad i = 0, \dots, n - (m-1)\tau - 1,

    with embedding dimension :math:`m` = ``dim`` and delay :math:`\tau` = ``delay``
    (in samples). The result is a read-only strided view of ``x``: no sample is
    copied, so embedding a long recording costs no memory. (Forward delays are
    used; Takens' theorem holds for either direction.)

    Parameters
    ----------
    x : array_like, shape (n,) or (n, 1)
        The scalar series, in its own unit. A float64 ndarray is viewed, not copied;
        other input is converted once.
    dim : int
        Embedding dimension :math:`m \ge 1`.
    delay : int
        Delay :math:`\tau \ge 1`, in samples.

    Returns
    -------
    ndarray, shape (n - (dim - 1) * delay, dim), same unit as ``x``
        Read-only view; ``np.shares_memory(embed(x, m, t), x)`` is true for
        float64 input.

    Raises
    ------
    ScoringInputError
        If ``x`` has more than one channel, contains NaN, or is too short:
        at least :math:`(m-1)\tau + 1` samples are needed.

    References
    ----------
    F. Takens (1981). Detecting strange attractors in turbulence. In *Dynamical
    Systems and Turbulence, Warwick 1980*, Lecture Notes in Mathematics 898,
    pp. 366-381. Springer.
    """
    dim = check_positive_int(dim, "dim")
    delay = check_positive_int(delay, "delay")
    series = as_series(x)
    span = (dim - 1) * delay + 1
    n = series.shape[0]
    if n < span:
        raise ScoringInputError(
            f"a series of {n} samples cannot be embedded with dim {dim} and delay {delay}: "
            f"at least {span} samples are needed",
            hint="use a smaller dim or delay, or a longer window",
        )
    windows = sliding_window_view(series, span)  # (n - span + 1, span), read-only view
    return windows[:, ::delay]
