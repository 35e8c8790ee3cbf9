"""Weighted least squares: pivoted Householder QR, and an extended-precision path.

The solver never forms X'X in double precision. Its steps:

1. Row weighting and exact column equilibration: each column of ``sqrt(W) X`` and the
   response are scaled by powers of two (exact in binary floating point), so that
   columns of 1e200 and 1e-200 meet on equal terms and nothing over- or underflows.
2. Householder QR with column pivoting (LAPACK ``dgeqp3``). The numerical rank is the
   number of diagonal entries of R with ``|R_ii| > tol * |R_11|``: ``tol = max(n, k) eps``
   (the tolerance LAPACK's and NumPy's rank routines use for singular values; Golub
   and Van Loan, Matrix Computations, 4th ed., 5.4.2) for large problems, and
   ``tol = 4 eps`` for problems small enough for the extended-precision path, where
   only columns dependent up to the rounding of their entries count as aliased.
3. Aliased columns are found in the order the caller posted them: a column is aliased
   when its distance from the span of the earlier kept columns is below the same
   tolerance; the linear relation that makes it so is returned.
4. The solution, residuals in extended precision (80-bit), sums of squares by exact
   (``math.fsum``) summation, and an estimate of the correct digits from the
   first-order forward error bound of least squares (Higham, Accuracy and Stability of
   Numerical Algorithms, 2nd ed., Theorem 20.1):
   ``|db|/|b| <~ eps (kappa + kappa^2 |r| / (|A| |b|))``.
5. When that estimate falls short and the problem is small enough, the answer is
   recomputed in multiple-precision arithmetic (mpmath) from the data as posted,
   with a working precision of ``30 + 2 log10(kappa)`` decimal digits: the normal
   equations are then harmless, because their rounding error ``10^-dps kappa^2`` is far
   below double precision.
"""

from __future__ import annotations

import functools
import math
from typing import Callable

import mpmath
import numpy as np
from scipy.linalg import blas, lapack

from .records import record

__all__ = ["Alias", "LeastSquares", "Projection", "RankDeficient", "ResponseScaleOutOfRange",
           "extended_work", "solve"]

EPS = float(np.finfo(float).eps)
LONG_EPS = float(np.finfo(np.longdouble).eps)
FULL_DIGITS = 15.9
SMALL_RANK_TOLERANCE = 4 * EPS
REFINE_ALWAYS_CELLS = 100_000


@record
class Alias:
    """A design column that is (numerically) a linear combination of kept columns.

    ``column`` equals ``sum(multiplier * column_i for column_i, multiplier in relation)``,
    all indices into the design as posted. An empty relation means the column is zero.
    """

    column: int
    relation: tuple[tuple[int, float], ...]


# The weighted response's scale |sqrt(W) y| must lie between 2^-960 and 2^1020: then it,
# its sums of squares' roots and residuals down to 2^-60 (about 1e-18) of it are normal
# doubles. Outside, the norms the inference divides by would overflow or underflow.
SCALE_EXPONENTS = (-960, 1020)


class ResponseScaleOutOfRange(Exception):
    """``|sqrt(W) y|`` is about ``2^exponent``, outside :data:`SCALE_EXPONENTS`."""

    def __init__(self, exponent: int):
        low, high = SCALE_EXPONENTS
        super().__init__(
            f"the response's scale, sqrt(sum w y^2), is about 1e{exponent * math.log10(2):.0f}: "
            f"outside what double precision carries with room for the residuals (1e"
            f"{low * math.log10(2):.0f} to 1e{high * math.log10(2):.0f}); divide the "
            "response (or the weights) by a power of ten and scale the results back")
        self.exponent = exponent


class RankDeficient(Exception):
    """The design has aliased columns and the caller asked not to drop them."""

    def __init__(self, aliases: tuple[Alias, ...], rank: int, n_columns: int):
        super().__init__(f"design rank {rank} is below its {n_columns} columns")
        self.aliases = aliases
        self.rank = rank
        self.n_columns = n_columns


@record
class Projection:
    """What robust covariances and influence measures need, in exactly scaled units.

    With ``A = sqrt(W) X diag(2^-e)`` (kept columns) and ``r_s = sqrt(W) (y - X b) 2^-e_y``:
    ``pseudo_inverse`` is ``A^+ = (A'A)^-1 A'`` (rows follow the kept columns), and
    ``leverages`` the diagonal of the hat matrix ``A A^+``, from the thin Q of the
    Householder factorisation (``h_i = |Q_i.|^2``).
    """

    pseudo_inverse: np.ndarray
    leverages: np.ndarray
    weighted_residuals: np.ndarray
    column_exponents: np.ndarray
    response_exponent: int


@record
class LeastSquares:
    """The weighted least-squares solution and what is needed to judge it.

    Attributes
    ----------
    coefficients : (k,) array
        ``b = argmin sum_i w_i (y_i - x_i b)^2``; NaN for aliased columns.
    root_diagonal : (k,) array
        ``sqrt(diag((X'WX)^-1))`` for the kept columns, NaN for aliased ones. A
        standard error is this times the residual standard deviation.
    covariance_factor : (k, k) array
        ``(X'WX)^-1`` over the kept columns (NaN rows and columns for aliased ones);
        entries that overflow double precision are infinite.
    covariance_root : (k, rank) array
        G with ``G G' = (X'WX)^-1`` over the kept columns (NaN rows for aliased ones):
        from R^-1 (or the Cholesky factor of the extended-precision inverse). Tests and
        predictions through G lose digits as kappa, through the covariance as kappa^2.
    fitted, residuals : (n,) arrays
        ``X b`` and ``y - X b`` (unweighted).
    residual_norm, regression_norm, total_norm : float
        Square roots of ``sum w r^2``, of ``sum w (yhat - ybar)^2`` (or ``sum w yhat^2``
        when not centered) and of ``sum w (y - ybar)^2`` (or ``sum w y^2``). Norms, not
        sums of squares, so that a response near 1e200 does not overflow.
    response_norm : float
        ``sqrt(sum w y^2)``.
    rank, estimable, aliases
        Numerical rank, a mask of the kept columns, and the aliased columns.
    singular_values : (rank,) array
        Singular values of the kept columns of the weighted design, each column
        scaled to unit length, largest first.
    right_singular_vectors : (rank, rank) array
        The matching right singular vectors as columns (rows follow the kept columns).
    rank_tolerance : float
        The tolerance on ``|R_ii|`` relative to ``|R_11|``: ``max(n, k) * eps``.
    condition_number : float
        ``sigma_max / sigma_min`` of the unit-column design over the kept columns.
    method : str
        ``"householder_qr"`` or ``"extended_precision"``.
    working_digits : float
        Decimal digits of the arithmetic that produced the answer.
    estimated_correct_digits : float
        Estimated correct significant digits of the estimates and standard errors.
    """

    coefficients: np.ndarray
    root_diagonal: np.ndarray
    covariance_factor: np.ndarray
    covariance_root: np.ndarray
    fitted: np.ndarray
    residuals: np.ndarray
    residual_norm: float
    regression_norm: float
    total_norm: float
    response_norm: float
    rank: int
    estimable: np.ndarray
    aliases: tuple[Alias, ...]
    singular_values: np.ndarray
    right_singular_vectors: np.ndarray
    rank_tolerance: float
    condition_number: float
    method: str
    working_digits: float
    estimated_correct_digits: float
    projection: Projection | None = None
    factor: tuple[np.ndarray, np.ndarray] | None = None
    thin_q: np.ndarray | None = None

    def coordinates(self, v: np.ndarray) -> np.ndarray:
        """``Q_1' v``: the coordinates of the orthogonal projection of ``v`` on the span
        of the kept ``sqrt(W) X`` (the projection is ``Q_1 Q_1' v``; its norm is theirs).
        From the Householder factor (``factor``: LAPACK's packed QR and tau; ``thin_q``:
        the first ``rank`` columns of Q, kept for small problems)."""
        if self.factor is None:
            raise ValueError("this solution keeps no factor")
        if self.thin_q is not None:
            return self.thin_q.T @ v
        qr, tau = self.factor
        return _apply_qt(qr, tau, v)[:self.rank]


def extended_work(n: int, k: int) -> int:
    """The cost measure of the extended-precision path: ``n (k + 2)^2``.

    Its time grows as n k^2 (the cross products) plus n k (the residuals) plus n (the
    conversions); ``(k + 2)^2`` keeps few-column problems, whose per-row costs dominate,
    inside the same time budget (measured: tests/benchmarks/bench_extended_path.py).
    """
    return n * (k + 2) * (k + 2)


def _power_of_two_exponents(a: np.ndarray, squares: np.ndarray | None = None) -> np.ndarray:
    """Exponents ``e`` such that ``a[:, j] * 2**-e[j]`` has a 2-norm in [0.5, 1).

    As C ints: numpy's ``ldexp`` takes those directly (64-bit exponents go through a
    cast that costs several times the scaling itself on a large design). ``squares``:
    ``sum_i a_ij^2`` per column, as ``np.einsum("ij,ij->j", a, a)`` gives it, when the
    caller has it already.
    """
    if a.shape[0]:
        if squares is None:
            squares = np.einsum("ij,ij->j", a, a)
        listed = squares.tolist()
        if listed and all(1e-290 < v < 1e290 for v in listed):  # False for a NaN too
            # No square overflowed and no column is zero or tiny: the norms are direct
            # (math.sqrt and math.frexp: the same correctly rounded root and exponent).
            return np.array([math.frexp(math.sqrt(v))[1] for v in listed], dtype=np.intc)
    big = np.maximum(np.max(a, axis=0), -np.min(a, axis=0)) if a.shape[0] else \
        np.zeros(a.shape[1])
    _, e_big = np.frexp(big)
    pre = np.ldexp(a, -e_big)
    norms = np.sqrt(np.einsum("ij,ij->j", pre, pre))
    _, e_norm = np.frexp(norms)
    exponents = e_big + e_norm
    return np.where(big > 0, exponents, 0).astype(np.intc)


def _power_of_two_exponent(v: np.ndarray) -> int:
    """The exponent ``e`` such that ``v * 2**-e`` has a 2-norm in [0.5, 1) (0 for zero)."""
    norm = _norm(v)
    if math.isfinite(norm):
        return math.frexp(norm)[1]
    return int(_power_of_two_exponents(v[:, None])[0])


@functools.lru_cache(maxsize=64)
def _upper_mask(k: int) -> np.ndarray:
    """A k x k array of ones on and above the diagonal, zeros below (read only)."""
    mask = np.triu(np.ones((k, k)))
    mask.setflags(write=False)
    return mask


def _householder(a: np.ndarray, overwrite: bool = False
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pivoted Householder QR of ``a`` (n x k, n >= k): the packed factor, pivots, tau.

    With ``overwrite`` the factor takes the place of ``a`` (Fortran-ordered), which is
    then lost; otherwise LAPACK factors a copy.
    """
    k = a.shape[1]
    # LAPACK's optimal workspace for dgeqp3 is 2k + (k + 1) nb with block size nb;
    # 64 covers the usual nb without a workspace query per call.
    lwork = 2 * k + (k + 1) * 64
    qr, jpvt, tau, _, info = lapack.dgeqp3(np.asfortranarray(a), lwork=lwork,
                                           overwrite_a=int(overwrite))
    if info != 0:
        raise ArithmeticError(f"dgeqp3 failed with info={info}")
    return qr, jpvt - 1, tau


def solve_triangular(r: np.ndarray, b: np.ndarray, trans: str = "N") -> np.ndarray:
    """``R^-1 b`` (or ``R^-T b``) for upper-triangular R, by LAPACK ``dtrtrs``.

    Called directly: scipy.linalg.solve_triangular's checks cost more than the solve
    itself on the small systems of a typical request.
    """
    x, info = lapack.dtrtrs(r, b, lower=0, trans=0 if trans == "N" else 1)
    if info < 0:
        raise ArithmeticError(f"dtrtrs failed with info={info}")
    return x


def _norm(v: np.ndarray) -> float:
    """The 2-norm of a vector (BLAS ``dnrm2``: scaled, so neither squares nor their sum
    overflow or underflow)."""
    return float(blas.dnrm2(v))


def _ldexp(v: float, e: int) -> float:
    """``v 2^e`` as a Python float, by the C library's ``ldexp`` as ``numpy.ldexp`` is
    (exact unless the result is subnormal, then correctly rounded); +-inf when it
    overflows, as numpy gives, instead of ``math.ldexp``'s OverflowError."""
    try:
        return math.ldexp(v, e)
    except OverflowError:
        return math.copysign(math.inf, v)


def _apply(qr: np.ndarray, tau: np.ndarray, v: np.ndarray, trans: str) -> np.ndarray:
    """``Q' v`` (``trans="T"``) or ``Q v`` (``"N"``) for the factor in ``qr`` and ``tau``."""
    c = np.asfortranarray(v.reshape(-1, 1))
    cq, _, info = lapack.dormqr("L", trans, qr, tau, c, lwork=64)
    if info != 0:
        raise ArithmeticError(f"dormqr failed with info={info}")
    return cq[:, 0]


def _apply_qt(qr: np.ndarray, tau: np.ndarray, v: np.ndarray) -> np.ndarray:
    return _apply(qr, tau, v, "T")


def _apply_q(qr: np.ndarray, tau: np.ndarray, v: np.ndarray) -> np.ndarray:
    return _apply(qr, tau, v, "N")


def _thin_q(qr: np.ndarray, tau: np.ndarray, r: int) -> np.ndarray:
    """The first ``r`` columns of Q, formed from the packed reflectors (LAPACK ``dorgqr``)."""
    q, _, info = lapack.dorgqr(qr[:, :r], tau[:r], lwork=max(1, 64 * r))
    if info != 0:
        raise ArithmeticError(f"dorgqr failed with info={info}")
    return q


class _Orthogonal:
    """Q of ``A P = Q R`` applied to vectors.

    Small problems form the thin ``Q_1`` once (two matrix products a use); large ones
    apply LAPACK's packed reflectors (``dormqr``) and never hold an n x k copy.
    """

    def __init__(self, qr: np.ndarray, tau: np.ndarray, k: int, explicit: bool):
        self.qr = qr
        self.tau = tau
        self.k = k
        self.thin = _thin_q(qr, tau, k) if explicit else None
        self.thin_t = None if self.thin is None else self.thin.T

    def leading(self, v: np.ndarray) -> np.ndarray:
        """``(Q' v)[:k] = Q_1' v``."""
        if self.thin_t is not None:
            return self.thin_t @ v
        return _apply_qt(self.qr, self.tau, v)[:self.k]

    def span(self, z: np.ndarray) -> np.ndarray:
        """``Q_1 z``."""
        if self.thin is not None:
            return self.thin @ z
        pad = np.zeros(self.qr.shape[0])
        pad[:self.k] = z
        return _apply_q(self.qr, self.tau, pad)


def _sequential_kept(b: np.ndarray, tolerance: float) -> list[int]:
    """Columns of ``b`` kept in order: each one farther than ``tolerance`` from the span of those before.

    Gram-Schmidt with one reorthogonalisation ("twice is enough"; Giraud, Langou and
    Rozloznik 2005), on the k x k factor R whose columns have the same linear
    relations as the design's.
    """
    kept: list[int] = []
    basis = np.zeros((b.shape[0], 0))
    for j in range(b.shape[1]):
        v = b[:, j].copy()
        for _ in range(2):
            v -= basis @ (basis.T @ v)
        distance = float(np.linalg.norm(v))
        if distance > tolerance:
            kept.append(j)
            basis = np.column_stack([basis, v / distance])
    return kept


def _aliases(r_full: np.ndarray, pivots: np.ndarray, rank: int, tolerance: float,
             exponents: np.ndarray) -> tuple[list[int], tuple[Alias, ...]]:
    k = r_full.shape[1]
    b = np.empty_like(r_full)
    b[:, pivots] = r_full
    kept = _sequential_kept(b, tolerance)
    if len(kept) != rank:
        kept = sorted(int(p) for p in pivots[:rank])
    aliased = [j for j in range(k) if j not in kept]
    found = []
    basis = b[:, kept]
    for j in aliased:
        if not np.any(b[:, j]):
            found.append(Alias(column=j, relation=()))
            continue
        c, *_ = np.linalg.lstsq(basis, b[:, j], rcond=None)
        big = np.max(np.abs(c))
        relation = tuple(
            (kept[i], float(np.ldexp(c[i], int(exponents[j] - exponents[kept[i]]))))
            for i in range(len(kept)) if abs(c[i]) > 1e-9 * big)
        found.append(Alias(column=j, relation=relation))
    return kept, tuple(found)


def _sum(v: np.ndarray) -> float:
    """A sum correctly rounded (``math.fsum``) for up to 65,536 terms; beyond, the exact
    sum of pairwise partial sums over blocks of 1,024 (error a few eps of the terms'
    absolute sum, at numpy speed)."""
    if v.size <= 65_536:
        return math.fsum(v.tolist())
    cut = v.size - v.size % 1024
    partial = v[:cut].reshape(-1, 1024).sum(axis=1)
    return math.fsum(partial.tolist()) + math.fsum(v[cut:].tolist())


def _fsum_sq(v: np.ndarray, w: np.ndarray | None = None) -> float:
    return _sum(v * v if w is None else w * v * v)


def _centre(y: np.ndarray, w: np.ndarray | None) -> float:
    if w is None:
        return _sum(y) / y.size
    return _sum(w * y) / _sum(w)


@record
class _Core:
    """The answer in scaled units, from either path."""

    coefficients: np.ndarray  # scaled, kept columns, in kept order
    covariance: np.ndarray  # scaled (A'A)^-1 over kept columns
    root: np.ndarray  # G with G G' = covariance (kept order)
    residuals: np.ndarray  # scaled, unweighted
    residual_ss: float
    regression_ss: float
    total_ss: float
    working_digits: float
    digits: float


class _Equilibrated:
    """The scaled design ``A = sqrt(W) X diag(2^-e)`` once it has been factored.

    Small problems keep A itself. Large ones let LAPACK factor A in its own place (one
    copy of the design less at the peak) and keep ``sqrt(W) X`` and ``e`` instead:
    ``A b = sqrt(W) X (2^-e b)`` is then the same floating-point computation, because
    each product ``x_ij (2^-e_j b_j)`` is the same real number as ``a_ij b_j`` and so
    rounds the same, as long as ``2^-e b`` is exact; when it is not, A is formed again.
    """

    def __init__(self, held: np.ndarray, exponents: np.ndarray | None = None):
        self.held = held
        self.exponents = exponents
        self.shape = held.shape
        self.size = held.size

    def times(self, b: np.ndarray) -> np.ndarray:
        """``A b`` in double precision (BLAS)."""
        e = self.exponents
        if e is None:
            return self.held @ b
        c = np.ldexp(b, -e)
        if np.array_equal(np.ldexp(c, e), b):
            return self.held @ c
        return np.ldexp(self.held, -e[None, :]) @ b

    def long_double(self) -> np.ndarray:
        """A as an 80-bit copy (exactly: the scaling is by powers of two)."""
        if self.exponents is None:
            return self.held.astype(np.longdouble)
        return np.ldexp(self.held.astype(np.longdouble), -self.exponents[None, :])


def _double_path(a: _Equilibrated, ys_w: np.ndarray, ys: np.ndarray, sw: np.ndarray | None,
                 w: np.ndarray | None, centered: bool, q: _Orthogonal, r11: np.ndarray,
                 pivots: np.ndarray, kappa: float, sigma_max: float) -> _Core:
    k = a.shape[1]
    bs = np.empty(k)
    bs[pivots] = solve_triangular(r11, q.leading(ys_w))
    # Residuals in 80-bit arithmetic where that is cheap; large problems keep double
    # (BLAS) residuals unless refinement asks for extended ones.
    small = a.size <= REFINE_ALWAYS_CELLS
    rinv, info = lapack.dtrtri(r11)
    if info != 0:
        raise ArithmeticError(f"dtrtri failed with info={info}")
    root = np.empty((k, k))
    root[pivots] = rinv
    cov = root @ root.T
    if small:
        a_ld = a.long_double()
        y_ld = ys_w.astype(np.longdouble)
        # A b in 80 bits, kept: the refinement's first residual needs the same product.
        product = a_ld @ bs.astype(np.longdouble)
        rw = (y_ld - product).astype(float)
    else:
        a_ld = y_ld = product = None
        rw = ys_w - a.times(bs)
    b_norm = _norm(bs)
    y_norm = _norm(ys_w)
    err_b, err_se = _error_bounds(bs, _norm(rw), b_norm, y_norm, cov, kappa, sigma_max)
    # Refine where it pays: always on small problems (cheap), and on large ones only
    # when the estimates have lost many of the digits double precision allows.
    worth = 8 * EPS if small else 1e-10
    if err_b > max(err_se, worth):
        if a_ld is None:
            a_ld = a.long_double()
            y_ld = ys_w.astype(np.longdouble)
        bs, last_change, steps = _refine(a_ld, q, r11, pivots, y_ld, bs, rw, product)
        if steps:
            # A converging refinement leaves an error below its last correction.
            err_b = min(err_b, max(10 * last_change, EPS))
            rw = _residual(y_ld, a_ld, bs)
            b_norm = _norm(bs)
    residuals = rw if sw is None else rw / sw
    rss = _fsum_sq(rw)
    fitted = ys - residuals
    if centered:
        ybar = _centre(ys, w)
        reg_ss = _fsum_sq(fitted - ybar, w)
        tot_ss = _fsum_sq(ys - ybar, w)
    else:
        reg_ss = _fsum_sq(fitted, w)
        tot_ss = _fsum_sq(ys, w)
    r_norm = math.sqrt(rss)
    # The residual norm carries the rounding of y - X b and
    # the second-order effect of the error in b; relative to a tiny residual
    # (a near-perfect fit) both grow, and the digits estimate says so.
    if r_norm > 0:
        # |A db|: from the bound on b, or from the backward error directly.
        move = min(sigma_max * b_norm * err_b,
                   EPS * math.sqrt(k) * (sigma_max * b_norm + y_norm + kappa * r_norm))
        relative_move = move / r_norm
        # Rounding of y - A b: 80-bit when a long-double copy was used, else double.
        res_eps = LONG_EPS if a_ld is not None else EPS
        err_sigma = (res_eps * (y_norm + sigma_max * b_norm) / r_norm
                     + 0.5 * relative_move * relative_move)
    else:
        err_sigma = 1.0 if y_norm > 0 else 0.0
    worst = max(err_b, err_se, err_sigma, EPS / 2)
    return _Core(coefficients=bs, covariance=cov, root=root, residuals=residuals,
                 residual_ss=rss,
                 regression_ss=reg_ss, total_ss=tot_ss, working_digits=15.95,
                 digits=min(FULL_DIGITS, -math.log10(worst)))


def _residual(y_ld: np.ndarray, a_ld: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``y - A b`` accumulated in 80-bit arithmetic (``y_ld`` and ``a_ld``: y and A in
    long double) and rounded once."""
    return (y_ld - a_ld @ b.astype(np.longdouble)).astype(float)


def _error_bounds(bs: np.ndarray, r_norm: float, b_norm: float, y_norm: float,
                  cov: np.ndarray, kappa: float, sigma_max: float) -> tuple[float, float]:
    """A priori relative error bounds of the estimates and of the standard errors.

    Component-wise first-order bound: a backward error dA of size eps |A| in A and dy
    of size eps |y| in y moves b by (A'A)^-1 (dA' r) - A^+ (dA b - dy) (Higham 2002,
    section 20.1), whose j-th entry is at most
    ``eps (|C_j.| |A| |r| + sqrt(C_jj) (|A| |b| + |y|))``, with C = (A'A)^-1; the
    standard errors, from R^-1, carry about ``eps kappa``. ``r_norm``, ``b_norm`` and
    ``y_norm`` are ``|r|``, ``|b|`` and ``|y|``; the k bounds are Python floats (IEEE
    arithmetic in numpy's order, without a numpy call per step).
    """
    k = bs.shape[0]
    scale = EPS * math.sqrt(k)
    along = sigma_max * b_norm + y_norm
    rows = np.einsum("ij,ij->i", cov, cov).tolist()
    # C_jj is a sum of squares (of the rows of R^-1): never negative, so math.sqrt holds.
    spread = [scale * (math.sqrt(c2) * sigma_max * r_norm + math.sqrt(c) * along)
              for c2, c in zip(rows, cov.diagonal().tolist())]
    return _relative_change(spread, bs.tolist()), scale * kappa


def _relative_change(dx: list[float], x: list[float]) -> float:
    """``max |dx_j| / |x_j|`` over the nonzero ``x_j`` (0 when there are none, NaN when a
    ratio is NaN, as numpy's max gives); Python floats: IEEE division, without a numpy
    call per step on the few coefficients of a typical request."""
    worst = 0.0
    for d, v in zip(dx, x):
        if v:
            ratio = abs(d) / abs(v)
            if ratio > worst:
                worst = ratio
            elif ratio != ratio:
                return math.nan
    return worst


def _refine(a_ld: np.ndarray, q: _Orthogonal, r11: np.ndarray, pivots: np.ndarray,
            y_ld: np.ndarray, bs: np.ndarray, r0: np.ndarray,
            product: np.ndarray | None = None,
            steps: int = 4) -> tuple[np.ndarray, float, int]:
    """Iterative refinement of the least-squares solution on the augmented system.

    ``[I A; A' 0] [r; x] = [y; 0]``, with the residuals ``f = y - r - A x`` and
    ``g = -A' r`` in 80-bit arithmetic and each correction from the Householder factor
    (Bjorck, Numerical Methods for Least Squares Problems, SIAM 1996, section 2.9.3):
    ``h = R^-T P'g``, ``z = (Q'f)_1 - h``, ``dx = P R^-1 z``, ``dr = f - Q_1 z``. It removes
    the ``kappa^2 |r|`` term of the error for ``kappa eps < 1``. ``y_ld`` is y in 80
    bits; ``product``, when given, is ``A bs`` in 80 bits (the caller's, for the first
    step). Returns the refined x, the last correction's largest component-wise relative
    size, and the steps taken.
    """
    k = a_ld.shape[1]
    x = bs
    r = r0
    a_t = a_ld.T
    last = math.inf
    taken = 0
    for _ in range(steps):
        if product is None:
            product = a_ld @ x.astype(np.longdouble)
        r_ld = r.astype(np.longdouble)
        f = (y_ld - r_ld - product).astype(float)
        product = None
        g = (-(a_t @ r_ld)).astype(float)
        h = solve_triangular(r11, g[pivots], trans="T")
        z = q.leading(f) - h
        dx = np.empty(k)
        dx[pivots] = solve_triangular(r11, z)
        dr = f - q.span(z)
        dx_list = dx.tolist()
        if not all(map(math.isfinite, dx_list)):
            break
        change = _relative_change(dx_list, x.tolist())
        if change > 0.5 * last:
            break
        x = x + dx
        r = r + dr
        last = change
        taken += 1
        if change < EPS:
            break
    return x, last, taken


def _extended_path(columns: Callable[[], list[list[mpmath.mpf]]], ys: np.ndarray,
                   w: np.ndarray | None, centered: bool, kappa: float) -> _Core:
    n = ys.shape[0]
    dps = int(min(150, max(34, 30 + 2 * math.log10(max(kappa, 1.0)))))
    mpf = mpmath.mpf
    fdot = mpmath.fdot
    fsum = mpmath.fsum
    with mpmath.workprec(int(dps * 3.33) + 8):
        cols = columns()
        k = len(cols)
        y = [mpf(v) for v in ys.tolist()]
        if w is None:
            wcols = cols
            wy = y
            wsum = mpf(n)
        else:
            wl = [mpf(v) for v in w.tolist()]
            wcols = [[wi * c for wi, c in zip(wl, col)] for col in cols]
            wy = [wi * yi for wi, yi in zip(wl, y)]
            wsum = fsum(wl)
        g = mpmath.matrix(k, k)
        for i in range(k):
            for j in range(i, k):
                g[i, j] = g[j, i] = fdot(wcols[i], cols[j])
        c = mpmath.matrix([fdot(wcols[i], y) for i in range(k)])
        ginv = mpmath.inverse(g)
        b = ginv * c
        bl = [b[i] for i in range(k)]
        rows = list(zip(*cols))
        fitted = [fdot(row, bl) for row in rows]
        resid = [yi - fi for yi, fi in zip(y, fitted)]
        weights = [mpf(1)] * n if w is None else wl
        rss = fdot([wi * ri for wi, ri in zip(weights, resid)], resid)
        if centered:
            ybar = fsum(wy) / wsum
            dev_f = [fi - ybar for fi in fitted]
            dev_y = [yi - ybar for yi in y]
        else:
            dev_f, dev_y = fitted, y
        reg = fdot([wi * d for wi, d in zip(weights, dev_f)], dev_f)
        tot = fdot([wi * d for wi, d in zip(weights, dev_y)], dev_y)
        coefficients = np.array([float(v) for v in bl])
        covariance = np.array([[float(ginv[i, j]) for j in range(k)] for i in range(k)])
        residuals = np.array([float(v) for v in resid])
        chol = mpmath.cholesky(ginv)
        root = np.array([[float(chol[i, j]) for j in range(k)] for i in range(k)])
        core = _Core(coefficients=coefficients, covariance=covariance, root=root,
                     residuals=residuals,
                     residual_ss=float(rss), regression_ss=float(reg), total_ss=float(tot),
                     working_digits=float(dps),
                     digits=min(FULL_DIGITS, dps - 2 * math.log10(max(kappa, 1.0)) - 2))
    return core


def solve(x: np.ndarray, y: np.ndarray, weights: np.ndarray | None = None, *,
          centered: bool, drop_aliased: bool = False, extended_max_work: int = 200_000,
          extended_below_digits: float = 13.5, want_projection: bool = False,
          exact_columns: Callable[[list[int], np.ndarray], list[list[mpmath.mpf]]] | None = None,
          rank_rows: int | None = None, rank_tolerance: float | None = None,
          column_squares: np.ndarray | None = None) -> LeastSquares:
    """Solve the weighted least-squares problem ``min sum_i w_i (y_i - x_i b)^2``.

    Parameters
    ----------
    x : (n, k) array
        The design, intercept column included when there is one; finite, n >= k.
    y : (n,) array
        The response, finite.
    weights : (n,) array or None
        Positive finite weights (rows of weight zero are removed before this call).
    centered : bool
        Whether sums of squares are about the (weighted) mean of y (a model with an
        intercept) or about zero.
    drop_aliased : bool
        Drop aliased columns and fit the rest; otherwise raise :class:`RankDeficient`.
    extended_max_work, extended_below_digits
        Take the extended-precision path when the double-precision estimate of
        correct digits is below ``extended_below_digits`` and :func:`extended_work` is at most
        ``extended_max_work``.
    exact_columns : callable or None
        ``exact_columns(columns, exponents)`` returns design columns (by index) times
        ``2**-exponents`` as mpmath numbers, exactly, for the extended-precision path;
        for columns formed from raw data (powers, products) more exactly than ``x``
        holds them. Default: the doubles of ``x``.
    rank_rows : int or None
        The number of observations behind ``x`` when ``x`` is a factor of the data (a
        summary) rather than the rows; it sets the rank tolerance. Default: n.
    rank_tolerance : float or None
        Overrides the tolerance on ``|R_ii| / |R_11|`` (for factors whose own rounding
        is known to be larger, such as one made from cross products).
    want_projection : bool
        Also return the :class:`Projection` (an n x rank array: ask only when robust
        covariances or per-row influence are wanted).
    column_squares : (k,) array or None
        ``np.einsum("ij,ij->j", x, x)`` when the caller has it (used without weights
        only): the column scaling starts from it instead of forming it again.

    Returns
    -------
    LeastSquares

    Raises
    ------
    RankDeficient
        The design's numerical rank is below its column count and ``drop_aliased``
        is false.
    ResponseScaleOutOfRange
        ``|sqrt(W) y|`` is too large or too small for the sums of squares to be held.

    Notes
    -----
    See the module docstring for the algorithm and its references.
    """
    n, k = x.shape
    if weights is None:
        sw = None
        xw = x
        shift = 0
        e_norm = _power_of_two_exponents(xw, column_squares)
        e_y = _power_of_two_exponent(y)
    else:
        # sqrt(W) X and sqrt(W) y are formed with the root weights scaled by 2^-shift
        # (largest in [0.5, 1)), so that neither overflows nor underflows for weights and
        # data near the ends of the double range; A and the scaled response are the same
        # numbers, their exponents carry the shift.
        sw = np.sqrt(weights)
        shift = math.frexp(float(sw.max()))[1] if sw.size else 0
        sw_unit = np.ldexp(sw, -shift)
        xw = np.multiply(x, sw_unit[:, None], out=np.empty(x.shape, order="F"))
        e_norm = _power_of_two_exponents(xw)
        e_y = _power_of_two_exponent(y * sw_unit) + shift
    e_col = e_norm + shift if shift else e_norm  # A = sqrt(W) X 2^-e_col = xw 2^-e_norm
    # The exponent test first: y.any() (a pass over y) only when it is out of range.
    if not SCALE_EXPONENTS[0] <= e_y <= SCALE_EXPONENTS[1] and y.any():
        raise ResponseScaleOutOfRange(e_y)
    ys = np.ldexp(y, -e_y)
    ys_w = ys if sw is None else ys * sw
    # Large designs: at most three copies of the data at the peak (the caller's, sqrt(W) X
    # or A, and the factor); see _Equilibrated.
    large = xw.size > REFINE_ALWAYS_CELLS
    if large and sw is not None:
        a = np.ldexp(xw, -e_norm[None, :], out=xw)  # xw is this call's own copy
        held = _Equilibrated(a)
    else:
        # Fortran order from the start: LAPACK factors it without another copy.
        a = np.ldexp(xw, -e_norm[None, :], out=np.empty(xw.shape, order="F"))
        held = _Equilibrated(xw, e_norm) if large else _Equilibrated(a)
    qr, pivots, tau = _householder(a, overwrite=large and sw is None)
    diag = [abs(v) for v in qr.diagonal().tolist()]
    rows = n if rank_rows is None else rank_rows
    if rank_tolerance is None:
        # Small enough for the extended path: only columns that are dependent up to
        # the rounding of their entries (|R_ii| within a few eps of |R_11|) are aliased,
        # so designs with scaled condition numbers up to about 1e15 are still solved.
        small = extended_work(rows, k) <= extended_max_work
        rank_tolerance = SMALL_RANK_TOLERANCE if small else max(rows, k) * EPS
    threshold = rank_tolerance * (diag[0] if k else 0.0)
    rank = len([v for v in diag if v > threshold]) if k and diag[0] > 0 else 0
    kept = list(range(k))
    aliases: tuple[Alias, ...] = ()
    if rank < k:
        kept, aliases = _aliases(np.triu(qr[:k, :k]), pivots, rank, threshold, e_col)
        if not drop_aliased:
            raise RankDeficient(aliases, rank, k)

    if len(kept) < k:
        if held.exponents is None:
            held = _Equilibrated(held.held[:, kept])
            qr, pivots, tau = _householder(held.held)
        else:
            held = _Equilibrated(xw[:, kept], e_norm[kept])
            qr, pivots, tau = _householder(
                np.ldexp(held.held, -held.exponents[None, :]), overwrite=True)
    rk = qr[:len(kept), :len(kept)] * _upper_mask(len(kept))
    unit = np.empty_like(rk)
    unit[:, pivots] = rk
    norms = np.sqrt(np.einsum("ij,ij->j", unit, unit))
    listed = norms.tolist()
    unit /= norms if listed and all(v > 0 for v in listed) else np.where(norms > 0, norms, 1.0)
    if len(kept):
        _, singular, vt, info = lapack.dgesdd(unit, compute_uv=1, full_matrices=0)
        if info != 0:
            _, singular, vt = np.linalg.svd(unit)
        top, low = singular.item(0), singular.item(-1)
        kappa = top / low if low else math.inf  # low > 0: the kept columns are independent
        # The Frobenius norm bounds |R|_2 from above (by at most sqrt(k)): the error
        # bounds that use it stay on the safe side, without a second SVD.
        sigma_max = math.sqrt(float(norms @ norms))
    else:
        singular, vt, kappa, sigma_max = np.zeros(0), np.zeros((0, 0)), 1.0, 1.0

    if len(kept):
        q = _Orthogonal(qr, tau, len(kept), explicit=held.size <= REFINE_ALWAYS_CELLS)
        core = _double_path(held, ys_w, ys, sw, weights, centered, q, rk, pivots,
                            kappa, sigma_max)
        method = "householder_qr"
        if (core.digits < extended_below_digits
                and extended_work(n, len(kept)) <= extended_max_work):
            if exact_columns is not None:
                def columns():
                    return exact_columns(kept, e_col[kept])
            else:
                xs = np.ldexp(x[:, kept], -e_col[kept][None, :])

                def columns():
                    return [[mpmath.mpf(v) for v in xs[:, j].tolist()]
                            for j in range(xs.shape[1])]
            core = _extended_path(columns, ys, weights, centered, kappa)
            method = "extended_precision"
    else:
        q = None
        method = "householder_qr"
        core = _Core(np.zeros(0), np.zeros((0, 0)), np.zeros((0, 0)), ys.copy(),
                     _fsum_sq(ys, weights), 0.0,
                     _fsum_sq(ys, weights), 15.95, FULL_DIGITS)

    full = len(kept) == k
    if full:
        e_kept = e_col
    else:
        kept_idx = np.array(kept, dtype=int)
        e_kept = e_col[kept_idx]
    down = -e_kept
    projection = None
    if want_projection:
        projection = _projection(qr, pivots, tau, len(kept), core.residuals, sw, e_kept, e_y,
                                 None if q is None else q.thin)
    with np.errstate(over="ignore"):
        kept_coefficients = np.ldexp(core.coefficients, e_y - e_kept)
        kept_root_diagonal = np.ldexp(np.sqrt(core.covariance.diagonal()), down)
        kept_covariance = np.ldexp(core.covariance, down[:, None] + down[None, :])
        kept_root = np.ldexp(core.root, down[:, None])
        residuals = np.ldexp(core.residuals, e_y)
    if full:
        coefficients, root_diagonal = kept_coefficients, kept_root_diagonal
        covariance, covariance_root = kept_covariance, kept_root
    else:
        coefficients = np.full(k, np.nan)
        coefficients[kept_idx] = kept_coefficients
        root_diagonal = np.full(k, np.nan)
        root_diagonal[kept_idx] = kept_root_diagonal
        covariance = np.full((k, k), np.nan)
        covariance[np.ix_(kept_idx, kept_idx)] = kept_covariance
        covariance_root = np.full((k, len(kept)), np.nan)
        covariance_root[kept_idx] = kept_root
    if full:
        estimable = np.empty(k, dtype=bool)
        estimable.fill(True)
    else:
        estimable = np.zeros(k, dtype=bool)
        estimable[kept_idx] = True
    return LeastSquares(
        coefficients=coefficients, root_diagonal=root_diagonal,
        covariance_factor=covariance, covariance_root=covariance_root,
        fitted=y - residuals, residuals=residuals,
        residual_norm=_ldexp(math.sqrt(core.residual_ss), e_y),
        regression_norm=_ldexp(math.sqrt(core.regression_ss), e_y),
        total_norm=_ldexp(math.sqrt(core.total_ss), e_y),
        response_norm=_ldexp(_norm(ys_w), e_y),
        rank=len(kept), estimable=estimable, aliases=aliases, singular_values=singular,
        right_singular_vectors=vt.T,
        rank_tolerance=rank_tolerance, condition_number=kappa, method=method,
        working_digits=core.working_digits, estimated_correct_digits=core.digits,
        projection=projection, factor=(qr, tau) if len(kept) else None,
        thin_q=None if q is None else q.thin)


def _projection(qr: np.ndarray, pivots: np.ndarray, tau: np.ndarray, r: int,
                residuals: np.ndarray, sw: np.ndarray | None, e_kept: np.ndarray,
                e_y: int, thin: np.ndarray | None = None) -> Projection:
    n = qr.shape[0]
    if r == 0:
        return Projection(np.zeros((0, n)), np.zeros(n), residuals, e_kept, e_y)
    q = _thin_q(qr, tau, r) if thin is None else thin
    rinv = solve_triangular(np.triu(qr[:r, :r]), np.eye(r))
    pinv = np.empty((r, n))
    pinv[pivots] = rinv @ q.T
    leverages = np.einsum("ij,ij->i", q, q)
    weighted = residuals if sw is None else residuals * sw
    return Projection(pseudo_inverse=pinv, leverages=leverages, weighted_residuals=weighted,
                      column_exponents=e_kept, response_exponent=e_y)
