"""Generalization bounds and leave-one-out estimates for a fitted classifier.

Pure numerical functions (numpy/scipy): no learner, no engine. Every function cites its published source.
The formulas for the xi-alpha estimate and the span estimate were written from memory of the papers; the
docstrings say exactly what was assumed.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy import linalg, optimize, special, stats

__all__ = [
    "SpanResult",
    "XiAlphaResult",
    "binomial_tail_inverse",
    "binomial_tail_inverse_log",
    "compression_bound",
    "kernel_r2",
    "kernel_r2_blocks",
    "loo_bound",
    "span_estimate",
    "support_fraction",
    "test_set_bound",
    "xi_alpha",
]

# Below this delta scipy's beta.isf loses relative accuracy (about 1e-6 at 1e-300); a root search on the
# binomial log-CDF takes over.
_ISF_MIN_LOG_DELTA = math.log(1e-250)


def _check_counts(n: int, k: int) -> None:
    if n < 0 or k < 0:
        raise ValueError(f"counts must be non-negative, got n={n}, k={k}")


def _log_binom_cdf(k: int, n: int, p: float) -> float:
    """log P[Binomial(n, p) <= k], summed in logs so that it never underflows."""
    j = np.arange(k + 1)
    return float(special.logsumexp(stats.binom.logpmf(j, n, p)))


def binomial_tail_inverse_log(n: int, k: int, log_delta: float) -> float:
    """Binomial tail inversion with the confidence given as ``log(delta)``.

    Same quantity as :func:`binomial_tail_inverse`; use it when ``delta`` is too small for a float (union
    bounds over many compression sets). For ``delta >= 1e-250`` it is ``beta.isf(delta, k + 1, n - k)``;
    below that it solves ``log P[Binomial(n, p) <= k] = log_delta`` for ``p`` by Brent's method, the CDF
    summed from ``binom.logpmf`` in logs.

    References
    ----------
    Langford, J. (2005). Tutorial on practical prediction theory for classification. JMLR 6:273-306.
    """
    _check_counts(n, k)
    if not log_delta < 0.0:
        raise ValueError(f"delta must lie in (0, 1), got log(delta)={log_delta}")
    if k >= n:
        return 1.0
    if log_delta >= _ISF_MIN_LOG_DELTA:
        p = float(stats.beta.isf(math.exp(log_delta), k + 1, n - k))
        if math.isfinite(p):  # isf returns NaN for some tiny deltas with k near n: solve below instead
            return p

    def gap(p: float) -> float:
        return _log_binom_cdf(k, n, p) - log_delta

    hi = 1.0 - np.finfo(float).eps
    if gap(hi) >= 0.0:  # the answer lies within one ulp of 1
        return 1.0
    return float(optimize.brentq(gap, 0.0, hi, xtol=1e-300, rtol=4 * np.finfo(float).eps, maxiter=500))


def binomial_tail_inverse(n: int, k: int, delta: float) -> float:
    """Binomial tail inversion Bin(n, k, delta): the largest p with P[Binomial(n, p) <= k] >= delta.

    Equals ``scipy.stats.beta.isf(delta, k + 1, n - k)`` (since P[Binomial(n, p) <= k] is the upper tail
    of Beta(k + 1, n - k) at p); 1.0 when ``k >= n``. ``isf`` is used rather than ``ppf(1 - delta)``,
    which rounds to 1 for tiny ``delta``.

    Parameters
    ----------
    n : int
        Number of trials (test rows).
    k : int
        Observed errors, ``0 <= k``.
    delta : float
        Confidence parameter in (0, 1): the bound fails with probability at most ``delta``.

    References
    ----------
    Langford, J. (2005). Tutorial on practical prediction theory for classification. JMLR 6:273-306,
    Definition 3.2 (binomial tail inversion).
    """
    if not 0.0 < delta < 1.0:
        raise ValueError(f"delta must lie in (0, 1), got {delta}")
    return binomial_tail_inverse_log(n, k, math.log(delta))


def test_set_bound(n: int, k: int, delta: float = 0.05) -> float:
    """Upper bound on the true error rate from ``k`` errors on ``n`` held-out rows: Bin(n, k, delta).

    Holds with probability at least ``1 - delta`` over the draw of the test set, for a classifier chosen
    without looking at it.

    References
    ----------
    Langford, J. (2005). Tutorial on practical prediction theory for classification. JMLR 6:273-306,
    Theorem 3.3 (test set bound).
    """
    return binomial_tail_inverse(n, k, delta)


test_set_bound.__test__ = False  # type: ignore[attr-defined]  # not a pytest test despite its name


def compression_bound(m: int, d: int, k: int, delta: float = 0.05) -> float:
    """Sample compression bound: error <= Bin(m - d, k, delta / (m * C(m, d))).

    The classifier is rebuilt from a compression set of ``d`` of the ``m`` training rows; ``k`` counts the
    training errors among the ``m - d`` rows outside the compression set. The factor ``m * C(m, d)`` is
    the union over compression-set sizes and subsets; ``C(m, d)`` is taken in logs (``gammaln``) so the
    confidence may be far below the float range. Returns 1.0 when ``d >= m``.

    References
    ----------
    Langford, J. (2005). Tutorial on practical prediction theory for classification. JMLR 6:273-306
    (sample compression bound); after Littlestone, N. & Warmuth, M. (1986). Relating data compression
    and learnability (technical report), and Floyd, S. & Warmuth, M. (1995). Sample compression,
    learnability, and the Vapnik-Chervonenkis dimension. Machine Learning 21:269-304.
    """
    if not 0.0 < delta < 1.0:
        raise ValueError(f"delta must lie in (0, 1), got {delta}")
    _check_counts(m, d)
    if d >= m:
        return 1.0
    if not 0 <= k <= m - d:
        raise ValueError(f"errors outside the compression set must lie in [0, {m - d}], got {k}")
    log_choose = special.gammaln(m + 1) - special.gammaln(d + 1) - special.gammaln(m - d + 1)
    log_delta = math.log(delta) - math.log(m) - float(log_choose)
    return binomial_tail_inverse_log(m - d, k, log_delta)


def support_fraction(d: int, m: int) -> float:
    """Share of support rows, d / m: an upper bound on the expected LOO error rate of an SVM.

    References
    ----------
    Vapnik, V. (1995). The Nature of Statistical Learning Theory. Springer (the expected LOO error of
    the optimal hyperplane is at most the expected number of support vectors over m).
    """
    if m <= 0 or not 0 <= d <= m:
        raise ValueError(f"need 0 <= d <= m and m > 0, got d={d}, m={m}")
    return d / m


def loo_bound(d: int, loo_misses_outside_support: int, m: int) -> float:
    """Bound on the LOO error rate: (d + LOO misses outside the support rows) / m.

    Leaving out a row outside the compression set leaves the model unchanged, so its LOO prediction is
    its training prediction; each support row can at most add one LOO miss.

    References
    ----------
    Vapnik, V. (1995). The Nature of Statistical Learning Theory. Springer (LOO errors are at most the
    number of support vectors).
    """
    if m <= 0 or not 0 <= d <= m or not 0 <= loo_misses_outside_support <= m - d:
        raise ValueError(
            f"need 0 <= d <= m, 0 <= misses <= m - d, got d={d}, misses={loo_misses_outside_support}, m={m}"
        )
    return (d + loo_misses_outside_support) / m


@dataclass(frozen=True)
class XiAlphaResult:
    """Result of :func:`xi_alpha`: ``mask`` marks rows counted as possible LOO errors."""

    count: int
    mask: np.ndarray
    r2: float
    rho: float

    @property
    def rate(self) -> float:
        """``count`` over the number of rows."""
        return self.count / self.mask.size if self.mask.size else 0.0


def kernel_r2(K: np.ndarray) -> float:
    """R^2 for the xi-alpha estimate: ``max K - min K`` over all training kernel values.

    Then ``c <= K(x, x') <= c + R^2`` for all training rows with ``c = min K`` (Joachims 2000; see
    :func:`xi_alpha`).
    """
    K = np.asarray(K, dtype=float)
    if K.ndim != 2 or K.shape[0] != K.shape[1] or K.size == 0:
        raise ValueError(f"K must be a non-empty square matrix, got shape {K.shape}")
    return float(K.max() - K.min())


def kernel_r2_blocks(
    X: np.ndarray, kernel: Callable[[np.ndarray, np.ndarray], np.ndarray], block_rows: int = 1024
) -> float:
    """:func:`kernel_r2` without forming the whole kernel matrix: ``kernel(X[i:j], X)`` block by block.

    Time is still O(n^2); memory is ``block_rows * n`` kernel values.
    """
    X = np.asarray(X)
    if X.shape[0] == 0:
        raise ValueError("X has no rows")
    hi, lo = -np.inf, np.inf
    for start in range(0, X.shape[0], block_rows):
        block = np.asarray(kernel(X[start : start + block_rows], X), dtype=float)
        hi, lo = max(hi, float(block.max())), min(lo, float(block.min()))
    return hi - lo


def xi_alpha(alpha: np.ndarray, margin: np.ndarray, r2: float, rho: float = 2.0) -> XiAlphaResult:
    """Joachims' xi-alpha estimate: rows with ``rho * alpha_i * R^2 + xi_i >= 1``.

    Their number upper-bounds the LOO errors of a soft-margin SVM (with ``rho = 2``).

    Parameters
    ----------
    alpha : array of shape (n,)
        Dual weights of all training rows, 0 outside the support rows (scikit-learn: ``|dual_coef_|``).
    margin : array of shape (n,)
        ``y_i f(x_i)`` with ``y_i`` in {-1, +1} and ``f`` the decision function including its bias.
    r2 : float
        R^2 with ``c <= K(x, x') <= c + R^2`` on the training rows, e.g. :func:`kernel_r2`.
    rho : float
        2 in the theorem.

    Notes
    -----
    From memory of the paper, assumed here: slack ``xi_i = max(0, 1 - y_i f(x_i))``; ``R^2`` is the range
    of the kernel values over all pairs of training rows, ``max K - min K`` (for the RBF kernel this equals
    the range of ``K(x, x) - K(x, x')``, the other reading of the condition). With per-class ``C``
    (class weights) the same formula is applied; the bound on the alphas does not enter.

    References
    ----------
    Joachims, T. (2000). Estimating the generalization performance of a SVM efficiently. Proceedings of
    the 17th International Conference on Machine Learning (ICML), 431-438.
    """
    alpha = np.asarray(alpha, dtype=float)
    margin = np.asarray(margin, dtype=float)
    if alpha.shape != margin.shape or alpha.ndim != 1:
        raise ValueError(f"alpha and margin must be 1-D of equal length, got {alpha.shape}, {margin.shape}")
    if r2 < 0 or rho <= 0:
        raise ValueError(f"need r2 >= 0 and rho > 0, got r2={r2}, rho={rho}")
    xi = np.maximum(0.0, 1.0 - margin)
    mask = rho * alpha * r2 + xi >= 1.0
    return XiAlphaResult(count=int(mask.sum()), mask=mask, r2=float(r2), rho=float(rho))


@dataclass(frozen=True)
class SpanResult:
    """Result of :func:`span_estimate`, over the support rows in the order given.

    ``span2`` is S_p^2 (``inf`` when no affine hull exists, ``nan`` for bounded rows under
    ``bounded_rule="error"``); ``mask`` marks rows estimated to be LOO errors; ``count`` is their number.
    """

    count: int
    mask: np.ndarray
    span2: np.ndarray
    bounded_rule: str
    ridge: float


def _ridged_cholesky(A: np.ndarray, ridge: float, scale: float) -> tuple[tuple[np.ndarray, bool], float]:
    """Cholesky factor of ``A + ridge * scale * I``; the ridge grows 100-fold (up to 1e-4) until it works."""
    while True:
        try:
            return linalg.cho_factor(A + ridge * scale * np.eye(A.shape[0]), lower=True), ridge
        except linalg.LinAlgError:
            if ridge >= 1e-4:
                raise ValueError(
                    "kernel matrix of the free support rows is not positive definite; "
                    "the span estimate needs a positive semi-definite kernel"
                ) from None
            ridge = max(ridge * 100.0, 1e-12)


def span_estimate(
    K_support: np.ndarray,
    alpha: np.ndarray,
    margin: np.ndarray,
    bounded: np.ndarray,
    *,
    bounded_rule: Literal["error", "span"] = "error",
    ridge: float = 1e-10,
) -> SpanResult:
    """Span estimate of the LOO errors of a soft-margin SVM.

    Under the assumption that the set of support vectors does not change when one of them is left out,
    ``y_p f^p(x_p) = y_p f(x_p) - alpha_p S_p^2``, with ``S_p`` the distance (in feature space) from
    ``x_p`` to the affine hull of the other free support vectors (``0 < alpha < C``). For a free support
    vector ``S_p^2 = 1 / (K~^{-1})_pp`` with ``K~ = [[K_free, 1], [1^T, 0]]``. A row is counted as a LOO
    error when ``alpha_p S_p^2 >= y_p f(x_p)``; rows outside the support set are never counted.

    Parameters
    ----------
    K_support : array of shape (s, s)
        Kernel matrix of the support rows.
    alpha, margin, bounded : arrays of shape (s,)
        Dual weights, ``y f(x)`` (decision function with bias) and the at-upper-limit mask of the same rows.
    bounded_rule : {"error", "span"}
        ``"error"`` counts every bounded support row as a LOO error (conservative). ``"span"`` applies the
        same rule to bounded rows with ``S_p^2 = K_pp - v^T K~^{-1} v``, ``v = (K(x_free, x_p), 1)``: the
        squared distance from ``x_p`` to the affine hull of the free support vectors.
    ridge : float
        ``K_free`` gets ``ridge * max|K_free|`` added to its diagonal before the Cholesky
        factorisation, so a singular matrix (duplicate rows, linear kernel with more free support vectors
        than features) still works; for free rows the added term is subtracted again from ``S_p^2``. As
        the ridge goes to 0 this tends to the exact span (minimum-norm affine combination). If the
        factorisation still fails the ridge grows 100-fold up to 1e-4; the ridge used is returned.

    Notes
    -----
    From memory of the paper, assumed here: the span is taken over the free support vectors only, and
    the bias constraint gives the row and column of ones in ``K~``; bounded support rows count as errors
    by default. Measured on scikit-learn's breast cancer data (569 rows, standardized; RBF, gamma=1/30,
    C=1): exact LOO errors 13, span estimate 62 with ``"error"`` and 14 with ``"span"``. It is an
    estimate, not a bound: it can miss LOO errors.

    References
    ----------
    Vapnik, V. & Chapelle, O. (2000). Bounds on error expectation for support vector machines. Neural
    Computation 12(9):2013-2036.
    """
    K = np.asarray(K_support, dtype=float)
    alpha = np.asarray(alpha, dtype=float)
    margin = np.asarray(margin, dtype=float)
    bounded = np.asarray(bounded, dtype=bool)
    s = alpha.size
    if K.shape != (s, s) or margin.shape != (s,) or bounded.shape != (s,):
        raise ValueError(
            f"K_support must be (s, s) and alpha, margin, bounded (s,), got {K.shape}, "
            f"{alpha.shape}, {margin.shape}, {bounded.shape}"
        )
    if bounded_rule not in ("error", "span"):
        raise ValueError(f"bounded_rule must be 'error' or 'span', got {bounded_rule!r}")
    if ridge < 0:
        raise ValueError(f"ridge must be >= 0, got {ridge}")

    free = np.flatnonzero(~bounded)
    bnd = np.flatnonzero(bounded)
    span2 = np.full(s, np.nan)
    if free.size:
        K_free = K[np.ix_(free, free)]
        scale = float(np.abs(K_free).max()) or 1.0
        factor, ridge = _ridged_cholesky(K_free, ridge, scale)
        eps = ridge * scale
        # Inverse of the bordered matrix [[A, 1], [1^T, 0]] by its Schur complement:
        # top-left block = A^-1 - u u^T / t, with u = A^-1 1 and t = 1^T A^-1 1.
        A_inv = linalg.cho_solve(factor, np.eye(free.size))
        u = A_inv.sum(axis=1)
        t = float(u.sum())
        diag = np.diag(A_inv) - u**2 / t
        with np.errstate(divide="ignore"):
            span2[free] = np.where(diag > 0, 1.0 / diag, np.inf) - eps
        span2[free] = np.maximum(span2[free], 0.0)
        if bounded_rule == "span" and bnd.size:
            V = K[np.ix_(free, bnd)]
            quad = np.einsum("ij,ij->j", V, linalg.cho_solve(factor, V))
            span2[bnd] = np.maximum(K[bnd, bnd] - quad + (1.0 - u @ V) ** 2 / t, 0.0)
    elif bounded_rule == "span":
        span2[bnd] = np.inf  # no free support vector: no affine hull to project on

    with np.errstate(invalid="ignore"):
        mask = alpha * span2 >= margin
    if bounded_rule == "error":
        mask[bnd] = True
    return SpanResult(
        count=int(mask.sum()), mask=mask, span2=span2, bounded_rule=bounded_rule, ridge=float(ridge)
    )
