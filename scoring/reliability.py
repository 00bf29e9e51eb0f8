"""Reliability of a score: the six intraclass correlations of Shrout & Fleiss.

Each participant (a *target*) is graded on ``k`` occasions (the *judges*:
repetitions of a move, or sessions for test-retest). The two-way analysis of
variance of the ``(n, k)`` table gives four mean squares,

.. math::

    \\mathrm{BMS} = \\frac{k \\sum_i (\\bar x_{i\\cdot} - \\bar x)^2}{n - 1},\\quad
    \\mathrm{JMS} = \\frac{n \\sum_j (\\bar x_{\\cdot j} - \\bar x)^2}{k - 1},

.. math::

    \\mathrm{WMS} = \\frac{\\sum_{ij} (x_{ij} - \\bar x_{i\\cdot})^2}{n (k - 1)},\\quad
    \\mathrm{EMS} = \\frac{\\sum_{ij} (x_{ij} - \\bar x_{i\\cdot} - \\bar x_{\\cdot j}
    + \\bar x)^2}{(n - 1)(k - 1)},

and the six forms (Shrout & Fleiss 1979, Table 3 and eqs. 2-4 and their
``k``-average versions):

.. math::

    \\mathrm{ICC}(1,1) = \\frac{\\mathrm{BMS} - \\mathrm{WMS}}{\\mathrm{BMS} + (k-1)\\mathrm{WMS}},
    \\quad
    \\mathrm{ICC}(1,k) = \\frac{\\mathrm{BMS} - \\mathrm{WMS}}{\\mathrm{BMS}},

.. math::

    \\mathrm{ICC}(2,1) = \\frac{\\mathrm{BMS} - \\mathrm{EMS}}
    {\\mathrm{BMS} + (k-1)\\mathrm{EMS} + k(\\mathrm{JMS} - \\mathrm{EMS})/n},
    \\quad
    \\mathrm{ICC}(2,k) = \\frac{\\mathrm{BMS} - \\mathrm{EMS}}
    {\\mathrm{BMS} + (\\mathrm{JMS} - \\mathrm{EMS})/n},

.. math::

    \\mathrm{ICC}(3,1) = \\frac{\\mathrm{BMS} - \\mathrm{EMS}}{\\mathrm{BMS} + (k-1)\\mathrm{EMS}},
    \\quad
    \\mathrm{ICC}(3,k) = \\frac{\\mathrm{BMS} - \\mathrm{EMS}}{\\mathrm{BMS}}.

Form 1 treats occasions as random and unstructured (one-way model), form 2 as
a random sample of occasions (absolute agreement), form 3 as fixed occasions
(consistency). For repetitions of the same move, ICC(3,1) answers "does one
repetition rank participants the way the others do"; ICC(2,1) also charges
systematic changes across repetitions (fatigue, learning) against reliability.

References
----------
Shrout, P. E., & Fleiss, J. L. (1979). Intraclass correlations: uses in
assessing rater reliability. Psychological Bulletin, 86(2), 420-428.

McGraw, K. O., & Wong, S. P. (1996). Forming inferences about some intraclass
correlation coefficients. Psychological Methods, 1(1), 30-46.
"""

from __future__ import annotations

import numpy as np

from echoreo.errors import ScoringInputError

__all__ = ["ICC_FORMS", "icc", "mean_squares"]

#: The keys of :func:`icc`'s result, in the order of Shrout & Fleiss (1979).
ICC_FORMS = ("ICC(1,1)", "ICC(2,1)", "ICC(3,1)", "ICC(1,k)", "ICC(2,k)", "ICC(3,k)")


def _table(ratings) -> np.ndarray:
    x = np.asarray(ratings, dtype=np.float64)
    if x.ndim != 2:
        raise ScoringInputError(
            f"ratings must be a 2-D table (n_targets, k_raters); got an array of shape {x.shape}",
            hint="pass one row per participant and one column per repetition or session",
        )
    complete = np.all(np.isfinite(x), axis=1)
    x = x[complete]
    n, k = x.shape
    if n < 2 or k < 2:
        raise ScoringInputError(
            f"an intraclass correlation needs at least 2 targets and 2 raters with complete "
            f"ratings; after dropping {int((~complete).sum())} incomplete rows, "
            f"{n} targets x {k} raters remain",
            hint="score more participants or more repetitions per participant",
        )
    return x


def mean_squares(ratings) -> dict[str, float]:
    """Mean squares of the two-way ANOVA of a ratings table.

    Parameters
    ----------
    ratings : array_like, shape (n_targets, k_raters)
        Rows with a missing (non-finite) rating are dropped (listwise deletion).

    Returns
    -------
    dict
        ``BMS``, ``JMS``, ``WMS``, ``EMS`` (formulas in the module docstring),
        and ``n``, ``k`` after dropping incomplete rows.
    """
    x = _table(ratings)
    n, k = x.shape
    grand = x.mean()
    row = x.mean(axis=1)
    col = x.mean(axis=0)
    ss_rows = k * np.sum((row - grand) ** 2)
    ss_cols = n * np.sum((col - grand) ** 2)
    ss_within = np.sum((x - row[:, None]) ** 2)
    ss_error = ss_within - ss_cols
    return {
        "BMS": ss_rows / (n - 1),
        "JMS": ss_cols / (k - 1),
        "WMS": ss_within / (n * (k - 1)),
        "EMS": ss_error / ((n - 1) * (k - 1)),
        "n": float(n),
        "k": float(k),
    }


def icc(ratings) -> dict[str, float]:
    """All six intraclass correlations of Shrout & Fleiss (1979).

    Parameters
    ----------
    ratings : array_like, shape (n_targets, k_raters)
        One row per target (participant), one column per rater (repetition or
        session). Rows with a missing rating are dropped.

    Returns
    -------
    dict
        Keys ``ICC(1,1)``, ``ICC(2,1)``, ``ICC(3,1)``, ``ICC(1,k)``,
        ``ICC(2,k)``, ``ICC(3,k)`` (formulas in the module docstring). A form
        whose denominator is zero (every rating identical) is NaN.

    Raises
    ------
    ScoringInputError
        Fewer than 2 complete targets or fewer than 2 raters.

    References
    ----------
    Shrout, P. E., & Fleiss, J. L. (1979). Psychological Bulletin, 86(2), 420-428.
    """
    ms = mean_squares(ratings)
    bms, jms, wms, ems, n, k = (ms[key] for key in ("BMS", "JMS", "WMS", "EMS", "n", "k"))

    def ratio(num: float, den: float) -> float:
        return float(num / den) if den != 0 else float("nan")

    return {
        "ICC(1,1)": ratio(bms - wms, bms + (k - 1) * wms),
        "ICC(2,1)": ratio(bms - ems, bms + (k - 1) * ems + k * (jms - ems) / n),
        "ICC(3,1)": ratio(bms - ems, bms + (k - 1) * ems),
        "ICC(1,k)": ratio(bms - wms, bms),
        "ICC(2,k)": ratio(bms - ems, bms + (jms - ems) / n),
        "ICC(3,k)": ratio(bms - ems, bms),
    }
