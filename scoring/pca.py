"""Principal component analysis of an embedded trajectory (estimator in the scikit-learn style)."""

from __future__ import annotations

import numpy as np

from echoreo.errors import ScoringInputError
from echoreo.scoring._checks import as_points, check_positive_int

__all__ = ["PCA"]


class PCA:
    r"""Principal component analysis by singular value decomposition.

    ``fit`` centres the data, :math:`X_c = X - \bar{x}`, and takes its thin SVD
    :math:`X_c = U S V^\top`. The principal axes are the rows of :math:`V^\top`,
    with variances

    .. math::

        \lambda_k = \frac{s_k^2}{n - 1}, \qquad
        r_k = \frac{\lambda_k}{\sum_{j=1}^{\min(n, m)} \lambda_j},

    and ``transform`` gives the scores :math:`Z = (X - \bar{x}) V_{:k}` (Jolliffe 2002).
    The leader's embedded repetition is fitted and the follower's embedding is
    transformed into the same basis, so both trajectories are read in the
    leader's principal coordinates.

    Sign convention (deterministic): each axis is flipped so that its entry of
    largest absolute value is positive (the first such entry on ties); this is the
    convention scikit-learn >= 1.5 uses for ``PCA(svd_solver="full")``.

    Parameters
    ----------
    n_components : int, optional
        Number of axes kept; default all, :math:`\min(n, m)`.

    Attributes
    ----------
    components_ : ndarray, shape (n_components, m)
        Principal axes (unit vectors), by decreasing variance.
    mean_ : ndarray, shape (m,)
        Mean of the training data, unit of the data.
    explained_variance_ : ndarray, shape (n_components,)
        :math:`\lambda_k`, unit of the data squared.
    explained_variance_ratio_ : ndarray, shape (n_components,)
        :math:`r_k`; all zeros when the training data are constant.
    singular_values_ : ndarray, shape (n_components,)
        :math:`s_k`.
    n_features_in_ : int
        :math:`m`.

    Notes
    -----
    Constant training data (zero variance) are a documented fallback, not an
    error: the axes are then the first coordinate axes, variances and ratios 0.

    References
    ----------
    I. T. Jolliffe (2002). *Principal Component Analysis*, 2nd ed. Springer
    Series in Statistics. Springer, New York.
    """

    def __init__(self, n_components: int | None = None):
        self.n_components = n_components

    def fit(self, X: object, y: object = None) -> PCA:
        """Learn the mean and principal axes of ``X``.

        Parameters
        ----------
        X : array_like, shape (n, m)
            Training data, e.g. the leader's embedded repetition; n >= 2.
        y : ignored
            Present for scikit-learn compatibility.

        Returns
        -------
        PCA
            ``self``.
        """
        data = as_points(X, "the PCA training data")
        n, m = data.shape
        if n < 2:
            raise ScoringInputError(
                f"PCA needs at least 2 samples to estimate variances; got {n}",
                hint="use a longer window",
            )
        full = min(n, m)
        k = full if self.n_components is None else check_positive_int(
            self.n_components, "n_components")
        if k > full:
            raise ScoringInputError(
                f"n_components={k} exceeds min(n_samples, n_features) = min({n}, {m}) = {full}"
            )
        mean = data.mean(axis=0)
        centred = data - mean
        _, s, vt = np.linalg.svd(centred, full_matrices=False)
        variance = s * s / (n - 1)
        total = variance.sum()
        if total == 0.0:
            vt = np.eye(full, m)
        pivot = np.argmax(np.abs(vt), axis=1)
        signs = np.sign(vt[np.arange(vt.shape[0]), pivot])
        signs[signs == 0] = 1.0
        vt = vt * signs[:, None]
        self.mean_ = mean
        self.components_ = vt[:k]
        self.explained_variance_ = variance[:k]
        self.explained_variance_ratio_ = (variance[:k] / total if total > 0
                                          else np.zeros(k))
        self.singular_values_ = s[:k]
        self.n_components_ = k
        self.n_features_in_ = m
        return self

    def transform(self, X: object) -> np.ndarray:
        """Scores of ``X`` in the learned basis.

        Parameters
        ----------
        X : array_like, shape (n, m)
            Data with the training data's ``m`` features (e.g. the follower's embedding).

        Returns
        -------
        ndarray, shape (n, n_components), unit of the data
            :math:`(X - \\bar{x}) V_{:k}`.
        """
        if not hasattr(self, "components_"):
            raise ScoringInputError("this PCA is not fitted yet; call fit() first")
        data = as_points(X, "the data to project")
        if data.shape[1] != self.n_features_in_:
            raise ScoringInputError(
                f"the data have {data.shape[1]} features but the PCA was fitted on "
                f"{self.n_features_in_}",
                hint="embed both trajectories with the same dimension",
            )
        return (data - self.mean_) @ self.components_.T

    def fit_transform(self, X: object, y: object = None) -> np.ndarray:
        """``fit(X)`` then ``transform(X)``; returns shape (n, n_components)."""
        return self.fit(X).transform(X)

    def inverse_transform(self, Z: object) -> np.ndarray:
        """Back from scores ``Z`` (n, n_components) to data space (n, m)."""
        if not hasattr(self, "components_"):
            raise ScoringInputError("this PCA is not fitted yet; call fit() first")
        scores = as_points(Z, "the scores")
        return scores @ self.components_ + self.mean_
