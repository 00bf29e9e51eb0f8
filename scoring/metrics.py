"""Comparison metrics of one repetition: leader versus follower in reconstructed state space.

Both one-dimensional repetition signals are embedded with the same
``(dim, delay)``; the leader's embedded repetition defines a principal-
component basis and the follower's embedding is projected into it. The
metrics compare the two projected trajectories. ``scoring/METHODS.md``
section 3 lists every formula with its source.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree
from scipy.spatial.distance import pdist

from echoreo.errors import ScoringInputError

__all__ = [
    "RepetitionComparison",
    "compare_repetition",
    "distances_from_origin",
    "iqr_ratio",
    "median_ratio",
    "shape_distance",
    "wasserstein_1d",
]

#: fewest delay vectors a repetition must give to be compared (below this the
#: distance quartiles and the recurrence lines are not meaningful).
MIN_VECTORS = 10


def distances_from_origin(p: np.ndarray) -> np.ndarray:
    """Euclidean distance of every point of a trajectory from the origin.

    .. math:: d_i = \\lVert \\mathbf{p}_i \\rVert_2

    Parameters
    ----------
    p : ndarray, shape (n, k)
        Trajectory in principal-component coordinates (unit of the signal).

    Returns
    -------
    ndarray, shape (n,)
    """
    p = np.asarray(p, dtype=np.float64)
    return np.sqrt(np.einsum("ij,ij->i", p, p))


def median_ratio(d_follower: np.ndarray, d_leader: np.ndarray) -> float:
    """Ratio of median distances from the origin, follower over leader.

    .. math:: r_\\mathrm{med} = \\operatorname{median}(d^F) / \\operatorname{median}(d^L)

    1 means the follower's reconstructed trajectory is as large as the
    leader's; 0.5 half as large.

    Parameters
    ----------
    d_follower, d_leader : ndarray, shape (n,)

    Returns
    -------
    float
        NaN when the leader's median distance is 0.
    """
    ml = float(np.median(d_leader))
    return float(np.median(d_follower)) / ml if ml > 0 else float("nan")


def _iqr(d: np.ndarray) -> float:
    q1, q3 = np.percentile(d, [25.0, 75.0])
    return float(q3 - q1)


def iqr_ratio(d_follower: np.ndarray, d_leader: np.ndarray) -> float:
    """Ratio of interquartile ranges of the distances from the origin, follower over leader.

    .. math:: r_\\mathrm{IQR} = (Q_3^F - Q_1^F) / (Q_3^L - Q_1^L)

    Quartiles by linear interpolation between order statistics (Hyndman &
    Fan 1996, definition 7; numpy's default).

    Returns
    -------
    float
        NaN when the leader's IQR is 0.

    References
    ----------
    Hyndman, R. J. & Fan, Y. (1996). Sample quantiles in statistical packages.
    *The American Statistician* 50, 361-365.
    """
    il = _iqr(d_leader)
    return _iqr(d_follower) / il if il > 0 else float("nan")


def wasserstein_1d(u: np.ndarray, v: np.ndarray) -> float:
    """First Wasserstein (earth mover's) distance between two one-dimensional samples.

    The area between the two empirical distribution functions:

    .. math::

        W_1(u, v) = \\int_{-\\infty}^{\\infty} \\lvert F_u(x) - F_v(x) \\rvert \\, dx
                  = \\sum_{k} \\lvert F_u(z_k) - F_v(z_k) \\rvert \\,(z_{k+1} - z_k)

    where :math:`z_1 \\le \\dots` are the pooled sorted values and
    :math:`F_u(z) = \\#\\{u_i \\le z\\} / n_u`.

    Parameters
    ----------
    u, v : ndarray, shape (n_u,), (n_v,)
        Samples (same unit); non-empty.

    Returns
    -------
    float
        Same unit as the samples.

    References
    ----------
    Vallender, S. S. (1973). Calculation of the Wasserstein distance between
    probability distributions on the line. *Theory of Probability and its
    Applications* 18, 784-786.
    """
    u = np.sort(np.asarray(u, dtype=np.float64).ravel())
    v = np.sort(np.asarray(v, dtype=np.float64).ravel())
    if u.size == 0 or v.size == 0:
        raise ScoringInputError("the Wasserstein distance needs two non-empty samples")
    z = np.sort(np.concatenate([u, v]))
    widths = np.diff(z)
    fu = np.searchsorted(u, z[:-1], side="right") / u.size
    fv = np.searchsorted(v, z[:-1], side="right") / v.size
    return float(np.sum(np.abs(fu - fv) * widths))


def shape_distance(a: np.ndarray, b: np.ndarray, scale: float) -> float:
    """Symmetric mean nearest-neighbour distance between two trajectories, normalised.

    .. math::

        D = \\frac{1}{2 s}\\left(
            \\frac{1}{n_a}\\sum_i \\min_j \\lVert a_i - b_j \\rVert +
            \\frac{1}{n_b}\\sum_j \\min_i \\lVert b_j - a_i \\rVert \\right)

    (the average of the two directed mean closest-point distances, a mean
    form of the Hausdorff distance; Dubuisson & Jain 1994), with :math:`s`
    the leader's size. 0 means the point sets coincide; the value does not
    depend on the timing along the trajectory.

    Parameters
    ----------
    a, b : ndarray, shape (n_a, k), (n_b, k)
        Leader and follower trajectories in the same coordinates.
    scale : float
        The leader's size :math:`s` (same unit), > 0.

    Returns
    -------
    float
        Dimensionless; NaN if ``scale`` is not positive.

    References
    ----------
    Dubuisson, M.-P. & Jain, A. K. (1994). A modified Hausdorff distance for
    object matching. *Proceedings of the 12th International Conference on
    Pattern Recognition*, 566-568.
    """
    if not scale > 0:
        return float("nan")
    da, _ = cKDTree(b).query(a, k=1)
    db, _ = cKDTree(a).query(b, k=1)
    return float(0.5 * (da.mean() + db.mean()) / scale)


@dataclass(frozen=True)
class RepetitionComparison:
    """Metrics and trajectories of one repetition.

    Attributes
    ----------
    median_ratio, iqr_ratio : float
        See :func:`median_ratio`, :func:`iqr_ratio`.
    wasserstein : float
        :func:`wasserstein_1d` of the distances from the origin divided by the
        leader's median distance (dimensionless).
    shape_distance : float
        :func:`shape_distance` with the leader's median distance as size.
    crqa : dict of str to float
        Cross-recurrence measures RR, DET, L, Lmax, ENTR, LAM, TT.
    radius : float
        Recurrence radius used (signal unit).
    leader_pc, follower_pc : ndarray, shape (n_vectors, 3)
        Trajectories in the first three principal components of the leader's
        embedding (zero columns when ``dim < 3``).
    leader_dist, follower_dist : ndarray, shape (n_vectors,)
        Distances from the origin.
    """

    median_ratio: float
    iqr_ratio: float
    wasserstein: float
    shape_distance: float
    crqa: dict
    radius: float
    leader_pc: np.ndarray
    follower_pc: np.ndarray
    leader_dist: np.ndarray
    follower_dist: np.ndarray


def _leader_basis(e_leader: np.ndarray, k: int):
    from echoreo.scoring.pca import PCA

    return PCA(n_components=k).fit(e_leader)


def compare_repetition(leader: np.ndarray, follower: np.ndarray, dim: int, delay: int, *,
                       n_components: int = 3, radius_fraction: float = 0.1,
                       lmin: int = 2, vmin: int = 2) -> RepetitionComparison:
    """Compare one repetition of leader and follower in reconstructed state space.

    1. Remove each signal's mean over the repetition (offsets, sensor bias).
    2. Embed both with :math:`(m, \\tau)`: :math:`\\mathbf{y}_i = (x_i, x_{i+\\tau},
       \\dots, x_{i+(m-1)\\tau})` (Takens 1981).
    3. PCA of the leader's embedding; both embeddings, each centred on its
       own mean, projected onto its first :math:`k = \\min(3, m)` principal
       axes (Broomhead & King 1986).
    4. Distances from the origin, their median and IQR ratios and the
       Wasserstein distance between the two distance distributions; the
       shape distance; cross recurrence of the two projected trajectories
       (Euclidean norm, no Theiler window) at radius
       :math:`\\varepsilon = f \\cdot \\max_{i,j} \\lVert p^L_i - p^L_j\\rVert`
       (``radius_fraction`` :math:`f` of the leader's phase-space diameter;
       Marwan et al. 2007, section 3.2.1, advise no more than 10 %).

    Parameters
    ----------
    leader, follower : ndarray, shape (n,)
        The repetition's one-dimensional signals on the same uniform grid
        (follower already shifted by its lag); finite.
    dim, delay : int
        Embedding dimension and delay (samples).
    n_components : int
        Principal components kept (3).
    radius_fraction : float
        :math:`f` above.
    lmin, vmin : int
        Shortest diagonal and vertical line counted by the recurrence analysis.

    Returns
    -------
    RepetitionComparison

    Raises
    ------
    ScoringInputError
        The repetition gives fewer than 10 delay vectors, or the leader's
        signal is constant.

    References
    ----------
    Takens, F. (1981). Detecting strange attractors in turbulence. *Lecture
    Notes in Mathematics* 898, 366-381.
    Broomhead, D. S. & King, G. P. (1986). Extracting qualitative dynamics from
    experimental data. *Physica D* 20, 217-236.
    Marwan, N., Romano, M. C., Thiel, M. & Kurths, J. (2007). Recurrence plots
    for the analysis of complex systems. *Physics Reports* 438, 237-329.
    """
    from echoreo.scoring.embedding import embed
    from echoreo.scoring.recurrence import rqa

    leader = np.asarray(leader, dtype=np.float64)
    follower = np.asarray(follower, dtype=np.float64)
    if leader.shape != follower.shape:
        raise ScoringInputError(
            f"leader and follower repetition signals differ in length "
            f"({leader.shape[0]} and {follower.shape[0]} samples)")
    n = leader.shape[0]
    n_vec = n - (dim - 1) * delay
    if n_vec < MIN_VECTORS:
        raise ScoringInputError(
            f"a repetition of {n} samples is shorter than the embedding window: dim {dim} and "
            f"delay {delay} span {(dim - 1) * delay + 1} samples and leave {max(n_vec, 0)} "
            f"delay vectors; at least {MIN_VECTORS} are needed",
            hint="use a smaller delay or dimension, or a higher rate_hz")
    xl = leader - leader.mean()
    xf = follower - follower.mean()
    if not np.ptp(xl) > 0:
        raise ScoringInputError("the leader's reference signal is constant in this repetition")
    el = np.ascontiguousarray(embed(xl, dim, delay))
    ef = np.ascontiguousarray(embed(xf, dim, delay))
    k = min(n_components, dim)
    pca = _leader_basis(el, k)
    pl = np.asarray(pca.transform(el))
    # the follower's embedding is centred on its own mean, then rotated into the leader's
    # axes: exact for gains and offsets (P_F = (E_F - mean E_F) V_L^T)
    pf = np.asarray(pca.transform(ef - ef.mean(axis=0) + pca.mean_))
    dl = distances_from_origin(pl)
    df = distances_from_origin(pf)
    size = float(np.median(dl))
    w = wasserstein_1d(df, dl) / size if size > 0 else float("nan")
    diameter = float(pdist(pl).max())
    radius = radius_fraction * diameter
    rq = rqa(pl, pf, radius=radius, lmin=lmin, vmin=vmin, theiler=0, norm="euclidean")
    crqa = {key: float(rq[key]) for key in ("RR", "DET", "L", "Lmax", "ENTR", "LAM", "TT")}
    if k < 3:
        pad = np.zeros((pl.shape[0], 3 - k))
        pl = np.hstack([pl, pad])
        pf = np.hstack([pf, pad])
    return RepetitionComparison(
        median_ratio=median_ratio(df, dl),
        iqr_ratio=iqr_ratio(df, dl),
        wasserstein=w,
        shape_distance=shape_distance(pl, pf, size),
        crqa=crqa,
        radius=radius,
        leader_pc=pl,
        follower_pc=pf,
        leader_dist=dl,
        follower_dist=df,
    )
