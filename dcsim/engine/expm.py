"""Matrix exponential and phi-functions, compiled for the kernel.

The kernel advances the linear part of the drive equations exactly over a step ``h``:
``x(t+h) = e^{hA} x + h phi1(hA) b``; the polynomial correction of the non-linear bus term
uses ``h phi2(hA)`` and ``h phi3(hA)``. All four come from one exponential of an augmented
block matrix.

References
----------
.. [1] C. Moler and C. Van Loan, "Nineteen dubious ways to compute the exponential of a
   matrix, twenty-five years later", SIAM Review 45(1) (2003) 3-49,
   doi:10.1137/S00361445024180 -- scaling and squaring with a diagonal Pade approximant.
.. [2] N. J. Higham, *Functions of Matrices*, SIAM (2008), sec. 10.7.4 and eq. (10.40):
   the phi-functions as blocks of the exponential of an augmented matrix.
.. [3] S. M. Cox and P. C. Matthews, "Exponential time differencing for stiff systems",
   J. Comput. Phys. 176 (2002) 430-455, doi:10.1006/jcph.2002.6995 -- ETD schemes.
.. [4] M. Hochbruck and A. Ostermann, "Exponential integrators", Acta Numerica 19 (2010)
   209-286, doi:10.1017/S0962492910000048.
"""

from __future__ import annotations

import numpy as np
from numba import njit

_PADE_ORDER = 6


@njit(cache=True, error_model="numpy", inline="always")
def matmul_small(a, b, out):
    """``out = a @ b`` for small square matrices (plain loops: no library call overhead)."""
    n = a.shape[0]
    for i in range(n):
        for j in range(n):
            out[i, j] = 0.0
        for k in range(n):
            aik = a[i, k]
            if aik != 0.0:
                for j in range(n):
                    out[i, j] += aik * b[k, j]


@njit(cache=True, error_model="numpy")
def _solve_in_place(den, num):
    """``num <- den^-1 num`` by Gaussian elimination with partial pivoting (``den`` is
    destroyed). The Pade denominator is well conditioned at the norms used (Moler & Van Loan
    [1]_, method 3)."""
    n = den.shape[0]
    for c in range(n):
        p = c
        big = abs(den[c, c])
        for r in range(c + 1, n):
            if abs(den[r, c]) > big:
                big = abs(den[r, c])
                p = r
        if p != c:
            for j in range(n):
                den[c, j], den[p, j] = den[p, j], den[c, j]
                num[c, j], num[p, j] = num[p, j], num[c, j]
        inv = 1.0 / den[c, c]
        for r in range(c + 1, n):
            f = den[r, c] * inv
            if f != 0.0:
                for j in range(c, n):
                    den[r, j] -= f * den[c, j]
                for j in range(n):
                    num[r, j] -= f * num[c, j]
    for c in range(n - 1, -1, -1):
        inv = 1.0 / den[c, c]
        for j in range(n):
            num[c, j] *= inv
        for r in range(c):
            f = den[r, c]
            if f != 0.0:
                for j in range(n):
                    num[r, j] -= f * num[c, j]


@njit(cache=True, error_model="numpy")
def expm(a: np.ndarray) -> np.ndarray:
    """Matrix exponential by scaling and squaring with the [6/6] Pade approximant [1]_.

    Parameters
    ----------
    a : (n, n) float array
        Matrix [any unit of 1/time times time, i.e. dimensionless].

    Returns
    -------
    (n, n) float array
        ``exp(a)``. The scaling makes the 1-norm of the scaled matrix at most 0.5, where the
        [6/6] approximant's truncation error is below 1e-16. Products and the solve are
        written as plain loops: for the 4x4 to 16x16 matrices of the kernels that is several
        times faster than library calls.
    """
    n = a.shape[0]
    norm = 0.0
    for j in range(n):
        col = 0.0
        for i in range(n):
            col += abs(a[i, j])
        norm = max(norm, col)
    squarings = 0
    if norm > 0.5:
        squarings = int(np.ceil(np.log2(norm / 0.5)))
    scale = 0.5**squarings
    x = a * scale
    q = _PADE_ORDER
    c = 1.0
    num = np.eye(n)
    den = np.eye(n)
    power = np.eye(n)
    tmp = np.empty((n, n))
    sign = 1.0
    for k in range(1, q + 1):
        c = c * (q - k + 1) / (k * (2 * q - k + 1))
        matmul_small(power, x, tmp)
        power, tmp = tmp, power
        sign = -sign
        for i in range(n):
            for j in range(n):
                v = c * power[i, j]
                num[i, j] += v
                den[i, j] += sign * v
    _solve_in_place(den, num)
    e = num
    for _ in range(squarings):
        matmul_small(e, e, tmp)
        e, tmp = tmp, e
    return e


@njit(cache=True, error_model="numpy")
def phi_blocks(a: np.ndarray, h: float):
    """Exact-step propagators of ``x' = A x + b + g(t)`` over a step ``h`` (Higham [2]_).

    With ``g`` a polynomial in time, ``g(t) = g0 + c1 t + c2 t^2``, the exact solution is
    ``x(h) = e^{hA} x + h phi1(hA) (b + g0) + h^2 phi2(hA) c1 + 2 h^3 phi3(hA) c2``
    (the variation-of-constants formula with ``int_0^h e^{(h-s)A} s^k ds = k! h^{k+1}
    phi_{k+1}(hA)``, Hochbruck & Ostermann 2010, eq. 2.9).

    Parameters
    ----------
    a : (n, n) float array
        System matrix ``A`` [1/s].
    h : float
        Step [s].

    Returns
    -------
    e : (n, n) float array
        ``exp(hA)``.
    f1, f2, f3 : (n, n) float arrays
        ``h phi1(hA)``, ``h phi2(hA)``, ``h phi3(hA)`` [s]; ``f1 = A^-1 (exp(hA) - I)``
        computed without inverting ``A``.
    """
    n = a.shape[0]
    m = np.zeros((4 * n, 4 * n))
    for i in range(n):
        for j in range(n):
            m[i, j] = h * a[i, j]
        m[i, n + i] = 1.0
        m[n + i, 2 * n + i] = 1.0
        m[2 * n + i, 3 * n + i] = 1.0
    big = expm(m)
    e = np.ascontiguousarray(big[:n, :n])
    f1 = np.ascontiguousarray(big[:n, n : 2 * n]) * h
    f2 = np.ascontiguousarray(big[:n, 2 * n : 3 * n]) * h
    f3 = np.ascontiguousarray(big[:n, 3 * n :]) * h
    return e, f1, f2, f3
