"""The outward kinematic recursion on component arrays (private to Robot).

Every 3-vector is a list of three components and every rotation a list of
nine (row-major); each component is either a Python float (the same for all
samples) or a 1-D array over samples. Keeping constants as floats lets the
products skip the zeros and ones of axis-aligned joints, and 1-D component
arrays are contiguous, so each operation is one streaming pass over memory.
The math is that of :meth:`echoreo.sim.robot.Robot.kinematics`.
"""

from __future__ import annotations

import numpy as np

_EPS = 1e-15
#: samples per chunk: about 64 kB per component array, so a joint's working set
#: stays in a core's L2 cache (measured fastest of 2k-64k in benchmarks/)
CHUNK = 8192


def _clean(x: float) -> float:
    return 0.0 if abs(x) < _EPS else float(x)


def mul(a, b):
    """a * b, skipping multiplications by constant 0 and 1."""
    if isinstance(a, float):
        if a == 0.0:
            return 0.0
        if a == 1.0:
            return b
        if isinstance(b, float):
            return a * b
    if isinstance(b, float):
        if b == 0.0:
            return 0.0
        if b == 1.0:
            return a
    return a * b


def add(a, b):
    """a + b, skipping additions of constant 0."""
    if isinstance(a, float) and a == 0.0:
        return b
    if isinstance(b, float) and b == 0.0:
        return a
    return a + b


def sub(a, b):
    """a - b, skipping subtractions of constant 0."""
    if isinstance(b, float) and b == 0.0:
        return a
    if isinstance(a, float) and a == 0.0:
        return -b
    return a - b


def dot3(terms):
    """Sum of products over (a, b) pairs."""
    out = 0.0
    for a, b in terms:
        out = add(out, mul(a, b))
    return out


def matmul(A, B):
    """3x3 product of component matrices (row-major lists of 9)."""
    return [dot3((A[3 * i + k], B[3 * k + j]) for k in range(3))
            for i in range(3) for j in range(3)]


def matvec(A, v):
    """A @ v for a component matrix and vector."""
    return [dot3((A[3 * i + k], v[k]) for k in range(3)) for i in range(3)]


def matTvec(A, v):
    """A.T @ v for a component matrix and vector."""
    return [dot3((A[3 * k + i], v[k]) for k in range(3)) for i in range(3)]


def cross(a, b):
    """a x b for component vectors."""
    return [sub(mul(a[1], b[2]), mul(a[2], b[1])),
            sub(mul(a[2], b[0]), mul(a[0], b[2])),
            sub(mul(a[0], b[1]), mul(a[1], b[0]))]


def vadd(a, b):
    return [add(x, y) for x, y in zip(a, b, strict=True)]


def vscale(s, a):
    return [mul(s, x) for x in a]


def consts(M) -> list:
    """A constant numpy vector or matrix as a flat list of floats."""
    return [_clean(x) for x in np.asarray(M, dtype=float).ravel()]


def joint_local(Ro, RoK, RoK2, s, omc):
    """Entries of R_o Rot(a, q) = R_o + sin(q) R_o K + (1 - cos q) R_o K^2."""
    out = []
    for c0, c1, c2 in zip(Ro, RoK, RoK2, strict=True):
        out.append(add(add(c0, mul(c1, s)), mul(c2, omc)))
    return out


def recursion(joints, order, base, q, qd=None, qdd=None):
    """Outward recursion; returns dicts of component rotations, positions and motion."""
    R = {base: consts(np.eye(3))}
    p = {base: [0.0, 0.0, 0.0]}
    motion = qd is not None
    w = {base: [0.0, 0.0, 0.0]}
    al = {base: [0.0, 0.0, 0.0]}
    acc = {base: [0.0, 0.0, 0.0]}
    for i in order:
        j = joints[i]
        P, C = j["parent"], j["child"]
        th = q[:, i]
        s = np.sin(th)
        omc = 1.0 - np.cos(th)
        local = joint_local(j["c_Ro"], j["c_RoK"], j["c_RoK2"], s, omc)
        RC = matmul(R[P], local)
        r = matvec(R[P], j["c_po"])
        R[C] = RC
        p[C] = vadd(p[P], r)
        if motion:
            u = matvec(RC, j["c_axis"])
            qdi, qddi = qd[:, i], qdd[:, i]
            wP = w[P]
            w[C] = vadd(wP, vscale(qdi, u))
            al[C] = vadd(vadd(al[P], vscale(qddi, u)), vscale(qdi, cross(wP, u)))
            acc[C] = vadd(acc[P], vadd(cross(al[P], r), cross(wP, cross(wP, r))))
    return R, p, w, al, acc


def stack_vec(v, n: int) -> np.ndarray:
    """(n, 3) array from a component vector."""
    out = np.empty((n, 3))
    for k in range(3):
        out[:, k] = v[k]
    return out


def stack_mat(M, n: int) -> np.ndarray:
    """(n, 3, 3) array from a component matrix."""
    out = np.empty((n, 3, 3))
    for k in range(9):
        out[:, k // 3, k % 3] = M[k]
    return out
