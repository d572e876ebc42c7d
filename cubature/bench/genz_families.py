"""Genz's six test families on the unit cube, with closed-form integrals.

References
----------
A. Genz, "Testing multidimensional integration routines", in *Tools, Methods
and Languages for Scientific and Engineering Computation*, B. Ford, J. C.
Rault and F. Thomasset (eds.), North-Holland (1984) 81–94.
A. Genz, "A package for testing multiple integration subroutines", in
*Numerical Integration*, P. Keast and G. Fairweather (eds.), Reidel (1987)
337–340.

The families on ``[0, 1]^d`` (``u`` a shift, ``a`` positive shape
parameters)::

    oscillatory     cos(2 pi u_1 + sum a_i x_i)
    product-peak    prod 1 / (a_i^-2 + (x_i - u_i)^2)
    corner-peak     (1 + sum a_i x_i)^-(d+1)
    gaussian        exp(-sum a_i^2 (x_i - u_i)^2)
    c0              exp(-sum a_i |x_i - u_i|)
    discontinuous   exp(sum a_i x_i) where x_1 <= u_1 and x_2 <= u_2, else 0

Parameters are random: ``u ~ U[0, 1]^d`` and ``a ~ U[0, 1]^d`` rescaled so
that ``sum a_i = difficulty * B[family]``.  Our choice of ``B`` is Genz's
(1984) difficulty constants, quoted from memory::

    oscillatory 9.0, product-peak 7.25, corner-peak 1.85,
    gaussian 7.03, c0 20.4, discontinuous 4.3

with *no* division by a power of ``d`` (Genz's 1987 package divides larger
constants by ``d^e``; keeping the sum fixed instead makes every axis easier
as ``d`` grows while the dimension itself makes the problem harder, a middle
road that keeps a 6-D study affordable).  ``difficulty`` scales all of them.

Exact values
------------
All families but the corner peak are products of one-dimensional integrals
(the oscillatory one through ``Re prod (e^{i a_k} - 1) / (i a_k)``).  The
corner peak uses the inclusion–exclusion sum over the cube's vertices::

    1 / (d! prod a_i) * sum_{v in {0,1}^d} (-1)^{|v|} / (1 + a . v)

which cancels catastrophically in floating point when the ``a_i`` are small;
it is therefore summed exactly in rational arithmetic (:class:`fractions.Fraction`
of the float parameters) and rounded once.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from fractions import Fraction
from itertools import product

import numpy as np
from scipy.special import erf

FAMILIES = ("oscillatory", "product-peak", "corner-peak", "gaussian", "c0", "discontinuous")
#: The smooth (analytic in the cube) families.
SMOOTH = FAMILIES[:4]
#: Sum of the shape parameters per family at difficulty 1 (Genz 1984, from memory).
DIFFICULTY = {"oscillatory": 9.0, "product-peak": 7.25, "corner-peak": 1.85, "gaussian": 7.03,
              "c0": 20.4, "discontinuous": 4.3}


@dataclass(frozen=True)
class GenzCase:
    """One drawn test integrand.

    Attributes
    ----------
    f : callable
        Vectorised integrand, ``f(X)`` with ``X`` of shape (n, d) -> (n,).
    exact : float
        The integral over ``[0, 1]^d`` from the closed form.
    params : dict
        ``{"a": ndarray (d,), "u": ndarray (d,)}``.
    family : str
    d : int
    """

    f: Callable
    exact: float
    params: dict
    family: str
    d: int

    @property
    def label(self) -> str:
        return f"{self.family}/d{self.d}"


# -- integrands ----------------------------------------------------------------

def integrand(family: str, a: np.ndarray, u: np.ndarray) -> Callable:
    """The vectorised integrand of ``family`` with parameters ``a``, ``u``.

    Parameters
    ----------
    family : str
        One of :data:`FAMILIES`.
    a, u : ndarray, shape (d,)

    Returns
    -------
    callable
        ``f(X)``, ``X`` of shape (n, d), returns shape (n,).
    """
    a = np.array(a, dtype=float)
    u = np.array(u, dtype=float)
    a.flags.writeable = False
    u.flags.writeable = False
    if family == "oscillatory":
        def f(X):
            return np.cos(2.0 * np.pi * u[0] + X @ a)
    elif family == "product-peak":
        c = a ** -2.0

        def f(X):
            return np.prod(1.0 / (c + (X - u) ** 2), axis=1)
    elif family == "corner-peak":
        p = -(a.size + 1.0)

        def f(X):
            return (1.0 + X @ a) ** p
    elif family == "gaussian":
        a2 = a * a

        def f(X):
            return np.exp(-(((X - u) ** 2) @ a2))
    elif family == "c0":
        def f(X):
            return np.exp(-(np.abs(X - u) @ a))
    elif family == "discontinuous":
        k = min(2, a.size)

        def f(X):
            inside = np.all(X[:, :k] <= u[:k], axis=1)
            return np.where(inside, np.exp(X @ a), 0.0)
    else:
        raise ValueError(f"unknown Genz family {family!r}; families: {', '.join(FAMILIES)}")
    f.fingerprint = f"genz:{family}:{a.tobytes().hex()}:{u.tobytes().hex()}"
    return f


# -- exact integrals ---------------------------------------------------------------

def _corner_peak_exact(a: np.ndarray) -> float:
    d = a.size
    fa = [Fraction(float(x)) for x in a]
    total = Fraction(0)
    for v in product((0, 1), repeat=d):
        s = Fraction(1) + sum((fa[i] for i in range(d) if v[i]), Fraction(0))
        total += (-1) ** sum(v) / s
    den = Fraction(math.factorial(d))
    for x in fa:
        den *= x
    return float(total / den)


def exact(family: str, a: np.ndarray, u: np.ndarray) -> float:
    """Closed-form integral of ``family`` over ``[0, 1]^d``.

    Parameters
    ----------
    family : str
    a, u : ndarray, shape (d,)

    Returns
    -------
    float
    """
    a = np.asarray(a, dtype=float)
    u = np.asarray(u, dtype=float)
    if family == "oscillatory":
        # Re[e^{i 2 pi u1} prod (e^{i a} - 1)/(i a)] = prod(sin(a/2)/(a/2)) cos(2 pi u1 + sum a/2)
        return float(np.prod(np.sinc(a / (2.0 * np.pi))) * np.cos(2.0 * np.pi * u[0] + a.sum() / 2.0))
    if family == "product-peak":
        return float(np.prod(a * (np.arctan(a * (1.0 - u)) + np.arctan(a * u))))
    if family == "corner-peak":
        return _corner_peak_exact(a)
    if family == "gaussian":
        return float(np.prod(np.sqrt(np.pi) / (2.0 * a) * (erf(a * (1.0 - u)) + erf(a * u))))
    if family == "c0":
        return float(np.prod((-np.expm1(-a * u) - np.expm1(-a * (1.0 - u))) / a))
    if family == "discontinuous":
        top = np.ones_like(a)
        k = min(2, a.size)
        top[:k] = u[:k]
        return float(np.prod(np.expm1(a * top) / a))
    raise ValueError(f"unknown Genz family {family!r}; families: {', '.join(FAMILIES)}")


# -- drawing ---------------------------------------------------------------------------

def draw(family: str, d: int, rng: np.random.Generator, difficulty: float = 1.0) -> GenzCase:
    """Draw one test case of ``family`` in dimension ``d``.

    Parameters
    ----------
    family : str
        One of :data:`FAMILIES`.
    d : int
        Dimension, ``>= 1`` (``>= 2`` is what the box rules need).
    rng : numpy.random.Generator
        Source of the parameters (seed it for a reproducible suite).
    difficulty : float
        Multiplies the sum of the shape parameters (see :data:`DIFFICULTY`).

    Returns
    -------
    GenzCase
    """
    if family not in FAMILIES:
        raise ValueError(f"unknown Genz family {family!r}; families: {', '.join(FAMILIES)}")
    if int(d) != d or d < 1:
        raise ValueError(f"dimension must be an integer >= 1, got {d}")
    if not difficulty > 0:
        raise ValueError(f"difficulty must be positive, got {difficulty}")
    d = int(d)
    u = rng.random(d)
    a = rng.random(d)
    a = np.maximum(a, 1e-3)  # keep every axis' parameter away from 0 (1/a appears in the exact forms)
    a *= difficulty * DIFFICULTY[family] / a.sum()
    return GenzCase(integrand(family, a, u), exact(family, a, u), {"a": a, "u": u}, family, d)
