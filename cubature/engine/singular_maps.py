"""Variable maps that flatten integrable power singularities, with their Jacobians.

An adaptive rule converges slowly (or not at all) next to an integrable
singularity such as ``x**-0.5`` on a face or ``|r|**-2.5`` at a corner: the
rule's polynomial model never fits.  Once the domain has been split so that the
singular set is a face or a vertex of every piece that touches it (see
:mod:`cubage.engine.partition`), a change of variables that is very flat there
multiplies the integrand by a Jacobian vanishing fast enough to cancel the
singularity, and the rule sees a smooth (or at least bounded) function.

Three maps, each sending its piece onto itself:

``endpoint``  (boxes, per axis)
    ``x = k + h u**p`` on an interval ``[k, k + h]`` graded at its left end
    (mirrored for the right end), ``dx/du = h p u**(p-1)``.  The classical
    polynomial change of variable for endpoint singularities (Davis &
    Rabinowitz, *Methods of Numerical Integration*, 2nd ed., 1984, on the
    removal of endpoint singularities by substitution).  For ``f ~ x**a``
    the mapped integrand is ``~ u**(p (a + 1) - 1)``: smooth when that
    exponent is a non-negative integer, see :func:`face_power`.  (Point
    singularities in a bounded box are better served by the radial map on
    the Kuhn simplices around the point: 3-20x fewer evaluations measured.)

``radial``  (simplices, at one vertex ``v``)
    ``y = v + s**(p-1) (x - v)`` with ``s = 1 - lambda_v(x)`` the barycentric
    distance from ``v`` (0 at ``v``, 1 on the opposite face), so that
    ``s(y) = s**p``.  In the coordinates (s, point on the opposite face) this
    is Duffy's collapse of the simplex onto its vertex (Duffy 1982, "Quadrature
    over a pyramid or cube of integrands with a singularity at a vertex", SIAM
    J. Numer. Anal. 19, 1260-1262) followed by the polynomial map ``s -> s**p``
    of the collapsed coordinate; its Jacobian determinant is
    ``p s**(d (p - 1))`` (derived: volume element ``s**(d-1) ds dw`` of the
    collapsed coordinates before and after; checked against finite differences
    in the tests).  ``|y - v|**a`` becomes ``~ s**(p (a + d) - d)``.

``faces``  (simplices, per face)
    With barycentric coordinates ``lambda_j`` and powers ``p_j`` (1 = face not
    graded), ``mu_j = lambda_j**p_j / S``, ``S = sum_k lambda_k**p_k``,
    ``y = sum_j mu_j v_j``.  Near face ``j`` (``lambda_j -> 0``) this behaves
    like the endpoint map in ``lambda_j``, so ``mu_j**a`` becomes
    ``~ lambda_j**(p_j (a + 1) - 1)``.  Jacobian determinant (derived here by the
    matrix-determinant lemma on ``d mu = (I - mu 1^T) diag(phi') d lambda / S``
    restricted to the plane ``sum d lambda = 0``; checked against finite
    differences in the tests)::

        J = prod_j (p_j lambda_j**(p_j - 1)) * (sum_j lambda_j / p_j) / S**(d + 1)

The maps never place a point exactly on the singular set: an offset that would
round onto it is floored at a few units in the last place of the coordinates
(zero when the singular set passes through the origin, where small offsets are
exact), while the Jacobian keeps its true value.
"""

from __future__ import annotations

import math

import numpy as np

_EPS = np.finfo(float).eps
#: Smallest offset a map produces from a singular set through the origin (keeps |r|**a finite for a >= -3).
TINY = 1e-100


def face_power(a: float | None) -> float:
    """Grading power for a singular factor ``t**a`` at a face (1-D endpoint).

    The endpoint map ``t = u**p`` turns ``t**a g(t)`` into
    ``p u**(p (a + 1) - 1) g(u**p)``: smooth when ``p`` is an integer and the
    exponent a non-negative integer.  The smallest such ``p <= 12`` is taken;
    otherwise the smallest integer ``p`` making the exponent at least 2.
    ``a = None`` (power not known) is treated as ``-1/2``.

    Parameters
    ----------
    a : float or None
        Exponent of the singular factor, ``-1 < a`` (``a >= 0`` needs no map).

    Returns
    -------
    float
    """
    a = -0.5 if a is None else float(a)
    if a >= 0 and abs(a - round(a)) < 1e-12:
        return 1.0                      # a polynomial factor: nothing to flatten
    if a <= -1:
        raise ValueError(f"a singularity t**{a:g} at a face is not integrable (the power must exceed -1)")
    c = a + 1.0
    for k in range(64):
        p = (k + 1) / c
        if p > 12.5:
            break
        if p >= 1 and abs(p - round(p)) < 1e-9:
            return float(round(p))
    return float(min(40, max(1, math.ceil(3.0 / c))))


def point_power(a: float | None, d: int) -> float:
    """Grading power for a point singularity ``|r|**a`` in ``d`` dimensions.

    Under the radial map the integrand becomes homogeneous of degree
    ``p (a + d) - d`` at the point; the smallest integer ``p`` making that
    degree at least 1 is taken (measured in ``benchmarks/features.py``: for
    ``1/|r|`` and ``|r|**-2.5`` in 3-D, degrees 1-2 need the fewest
    evaluations; steeper maps cost more elsewhere).
    ``a = None`` (power not known) is treated as ``-d/2``.

    Parameters
    ----------
    a : float or None
        Exponent, ``a > -d`` (integrable).
    d : int
        Dimension.

    Returns
    -------
    float
    """
    a = -0.5 * d if a is None else float(a)
    if a >= 0 and abs(a - round(a)) < 1e-12 and round(a) % 2 == 0:
        return 1.0                      # |r|**(2k) is a polynomial
    if a <= -d:
        raise ValueError(f"a point singularity |r|**{a:g} is not integrable in {d}-D (the power must exceed {-d})")
    return float(max(1, math.ceil((d + 1.0) / (a + d) - 1e-9)))


# --------------------------------------------------------------------------
# endpoint (per-axis) map
# --------------------------------------------------------------------------

def endpoint_map(t: np.ndarray, lo: np.ndarray, h: np.ndarray, p: np.ndarray,
                 left: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The polynomial endpoint map on intervals ``[lo, lo + h]``, elementwise.

    Parameters
    ----------
    t : ndarray
        Points, each in its interval.
    lo, h : ndarray
        Interval start and width (broadcast with ``t``).
    p : ndarray
        Power (1 = identity).
    left : ndarray of bool
        True: graded at ``lo``; False: graded at ``lo + h``.

    Returns
    -------
    x, dxdt : ndarray
    """
    u = np.clip((t - lo) / h, 0.0, 1.0)
    w = np.where(left, u, 1.0 - u)
    wp = w ** p
    end = np.where(left, lo, lo + h)
    floor = np.where(end == 0.0, TINY * h, 8.0 * np.spacing(np.abs(end)))
    off = np.maximum(h * wp, np.minimum(floor, 0.5 * h))
    x = np.where(left, lo + off, lo + h - off)
    with np.errstate(divide="ignore", invalid="ignore", under="ignore"):
        dx = np.where(p == 1.0, 1.0, p * w ** (p - 1.0))
    return x, dx


# --------------------------------------------------------------------------
# simplex maps
# --------------------------------------------------------------------------

def barycentric(x: np.ndarray, verts: np.ndarray) -> np.ndarray:
    """Barycentric coordinates (n, d+1) of points ``x`` (n, d) in simplices ``verts`` (n, d+1, d)."""
    e = verts[:, 1:, :] - verts[:, :1, :]                     # (n, d, d) rows = edges
    rhs = x - verts[:, 0, :]
    lam = np.linalg.solve(np.transpose(e, (0, 2, 1)), rhs[:, :, None])[:, :, 0]
    return np.concatenate([1.0 - lam.sum(axis=1, keepdims=True), lam], axis=1)


def radial_map(x: np.ndarray, verts: np.ndarray, vertex: np.ndarray, p: np.ndarray,
               lam: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Duffy-type radial grading at vertex ``vertex`` of each simplex.

    Parameters
    ----------
    x : ndarray (n, d)
        Points in their simplices.
    verts : ndarray (n, d+1, d)
        The simplex (piece) of each point.
    vertex : ndarray of int (n,)
        Index of the singular vertex.
    p : ndarray (n,)
        Power (1 = identity).
    lam : ndarray (n, d+1), optional
        Barycentric coordinates of ``x`` if already known.

    Returns
    -------
    y : ndarray (n, d)
    jac : ndarray (n,)
        ``p s**(d (p - 1))``.
    """
    n, d = x.shape
    if lam is None:
        lam = barycentric(x, verts)
    rows = np.arange(n)
    v = verts[rows, vertex]
    s = np.clip(1.0 - lam[rows, vertex], 0.0, 1.0)
    size = np.abs(verts - v[:, None, :]).max(axis=(1, 2))
    vmax = np.abs(v).max(axis=1)
    floor = np.where(vmax == 0.0, TINY, 8.0 * _EPS * vmax / np.maximum(size, 1e-300))
    with np.errstate(divide="ignore", invalid="ignore", under="ignore"):
        fac = np.where(p == 1.0, 1.0, s ** (p - 1.0))
        # the offset |y - v| ~ s**p * size must not round to zero
        low = s ** p < floor
        fac = np.where(low & (s > 0), floor / np.where(s > 0, s, 1.0), fac)
        fac = np.where(low & (s == 0), 0.0, fac)
        jac = np.where(p == 1.0, 1.0, p * s ** (d * (p - 1.0)))
    y = v + fac[:, None] * (x - v)
    if np.any(low & (s == 0)):
        # a point exactly at the vertex (never a rule node): move it off, weight zero
        z = low & (s == 0)
        c = verts[z].mean(axis=1)
        y[z] = v[z] + floor[z, None] * (c - v[z])
        jac = np.where(z, 0.0, jac)
    return y, jac


def face_floors(verts: np.ndarray) -> np.ndarray:
    """Smallest ``mu_j`` the faces map produces for each face of simplices ``verts`` (k, d+1, d).

    Zero offsets are avoided: a face in a coordinate plane through the origin
    (where small offsets are exact) gets :data:`TINY`; any other face a few
    units in the last place of the coordinates, relative to the vertex's height.
    """
    k, d1, d = verts.shape
    mask = ~np.eye(d1, dtype=bool)
    fverts = np.broadcast_to(verts[:, None, :, :], (k, d1, d1, d))[:, mask].reshape(k, d1, d, d)
    through0 = _face_through_origin(fverts)
    vmax = np.abs(verts).max(axis=(1, 2))
    return np.where(through0, TINY, 8.0 * _EPS * np.maximum(vmax, 1e-300)[:, None] / _heights(verts))


def faces_map(x: np.ndarray, verts: np.ndarray, powers: np.ndarray,
              lam: np.ndarray | None = None, floor: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Per-face power grading of simplices (see the module docstring).

    Parameters
    ----------
    x : ndarray (n, d)
    verts : ndarray (n, d+1, d)
    powers : ndarray (n, d+1)
        ``p_j`` for the face opposite vertex ``j`` (1 = not graded).
    lam : ndarray (n, d+1), optional
    floor : ndarray (n, d+1), optional
        :func:`face_floors` of each point's simplex (computed when not given).

    Returns
    -------
    y : ndarray (n, d)
    jac : ndarray (n,)
    """
    n, d = x.shape
    if lam is None:
        lam = barycentric(x, verts)
    lam = np.clip(lam, 0.0, 1.0)
    if floor is None:
        floor = face_floors(verts)
    with np.errstate(divide="ignore", invalid="ignore", under="ignore", over="ignore"):
        phi = lam ** powers
        graded = powers != 1.0
        phi_eff = np.where(graded, np.maximum(phi, floor), phi)
        S = phi.sum(axis=1)
        mu = phi_eff / phi_eff.sum(axis=1, keepdims=True)
        dphi = np.where(graded, powers * lam ** (powers - 1.0), 1.0)
        jac = np.prod(dphi, axis=1) * (lam / powers).sum(axis=1) / S ** (d + 1)
    y = np.einsum("nj,njd->nd", mu, verts)
    return y, np.where(np.isfinite(jac), jac, 0.0)


def _heights(verts: np.ndarray) -> np.ndarray:
    """Distance of each vertex from its opposite face, (n, d+1)."""
    n, d1, d = verts.shape
    vol = np.abs(np.linalg.det(verts[:, 1:, :] - verts[:, :1, :])) / math.factorial(d)
    out = np.empty((n, d1))
    for j in range(d1):
        f = np.delete(verts, j, axis=1)
        if d == 1:
            area = np.ones(n)
        else:
            e = f[:, 1:, :] - f[:, :1, :]
            g = np.einsum("nid,njd->nij", e, e)
            area = np.sqrt(np.abs(np.linalg.det(g))) / math.factorial(d - 1)
        out[:, j] = d * vol / np.maximum(area, 1e-300)
    return np.maximum(out, 1e-300)


def _face_through_origin(fverts: np.ndarray) -> np.ndarray:
    """True where the affine hull of a face (n, d+1, d, d) contains the origin (exactly, in floats)."""
    n, m, k, d = fverts.shape
    if k == 1:
        return np.all(fverts[:, :, 0, :] == 0.0, axis=-1)
    # the face lies in a coordinate plane x_i = 0 (the usual case: faces of the standard simplex and boxes)
    return np.any(np.all(fverts == 0.0, axis=2), axis=-1)
