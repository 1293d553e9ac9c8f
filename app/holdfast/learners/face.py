"""Newton steps on a face of the SVM dual's box, solved cheaply from the full solution's face.

On the face where the free rows are F (the others stay at 0 or C) the dual is an equality-constrained
quadratic; its Newton step d solves ``Q_FF d + b y_F = -G_F``, ``y_F'd = 0`` (the KKT system of the face
problem; Nocedal & Wright 2006, *Numerical Optimization*, section 16.1): with ``p = Q_FF^-1 G_F`` and
``q = Q_FF^-1 y_F``, ``d = -(p + b q)`` and ``b = -(y_F'p) / (y_F'q)``.

A refit's free set differs from the full solution's F0 by a few rows, so instead of a new O(|F|^3)
factorisation per step, the inverse H of ``Q_F0F0`` is computed once per model and each step costs
O(|F0|^2 k) for k changed rows:

* rows R of F0 that left the face: for S = F0 without R, ``(Q_SS)^-1 = H_SS - H_SR (H_RR)^-1 H_RS``
  (the inverse of a principal submatrix from the inverse of the whole; e.g. Golub & Van Loan 2013,
  *Matrix Computations*, 4th ed., section 3.2 on Schur complements / block elimination);
* rows A that joined it: block elimination of ``[[Q_SS, B], [B', D]]`` with the Schur complement
  ``D - B'(Q_SS)^-1 B`` (same source).

The step is a step: the caller updates the gradient from the alpha changes actually made and finishes with
SMO at the target tolerance, so rounding in the inverse costs iterations, never exactness.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from holdfast.learners.smo import Kernel

#: Largest free set whose inverse is kept (|F0|^2 float64: 72 MB at 3,000).
MAX_FACE_ROWS = 3000
#: Most rows that may differ from F0 (left plus joined) before a step is solved directly instead.
MAX_CHANGED = 400
#: Largest step entry believed (alphas lie in [0, C] with C <= 1e5 times a class weight).
MAX_STEP = 1e8
#: Largest |Q H - I| entry accepted for the stored inverse (else none is kept).
INVERSE_CHECK = 1e-6
#: Largest kernel block ``K(F0, N)`` kept for gradient updates after Newton steps (bytes).
NEAR_BLOCK_MAX_BYTES = 256 * 1024**2


@dataclass
class FaceInverse:
    """The inverse H of ``Q_F0F0`` over the full solution's free rows F0 (``rows``, positions), each
    position's place in F0 (``where``, -1 outside), and the kernel block ``K_F0F0`` itself (``K``).

    Optionally the block ``KN = K(F0, N)`` against the columns N (``near``: the rows a refit works on):
    after Newton steps the active rows' gradient changes by a sum of F0's kernel rows over N, which is
    then one dense product over a contiguous block instead of a gather from full kernel rows (whose
    memory traffic, |F0| rows of m values each, was most of a refit's time at 20,000-50,000 rows).
    """

    rows: np.ndarray
    where: np.ndarray
    H: np.ndarray
    K: np.ndarray
    near_where: np.ndarray | None = None
    KN: np.ndarray | None = None

    @classmethod
    def build(
        cls,
        kernel: Kernel,
        idx: np.ndarray,
        y: np.ndarray,
        alpha: np.ndarray,
        C: np.ndarray,
        near: np.ndarray | None = None,
    ) -> FaceInverse | None:
        """From a solution; None when F0 is empty, too large, or ``Q_F0F0`` is too close to singular for
        its inverse to pass ``INVERSE_CHECK``. ``near``: positions N for ``KN`` (kept when it takes at
        most ``NEAR_BLOCK_MAX_BYTES``)."""
        F0 = np.flatnonzero((alpha > 0) & (alpha < C))
        if len(F0) == 0 or len(F0) > MAX_FACE_ROWS:
            return None
        KF = kernel.rows(idx[F0], idx[F0])
        Q = KF * np.outer(y[F0], y[F0])
        try:
            H = np.linalg.inv(Q)
        except np.linalg.LinAlgError:
            return None
        if not np.all(np.isfinite(H)) or np.max(np.abs(Q @ H - np.eye(len(F0)))) > INVERSE_CHECK:
            return None
        where = np.full(len(idx), -1, dtype=np.int64)
        where[F0] = np.arange(len(F0))
        face = cls(rows=F0, where=where, H=H, K=KF)
        if near is not None and len(near) > 0 and len(F0) * len(near) * 8 <= NEAR_BLOCK_MAX_BYTES:
            face.near_where = np.full(len(idx), -1, dtype=np.int64)
            face.near_where[near] = np.arange(len(near))
            face.KN = kernel.rows(idx[F0], idx[near])
        return face

    def combo(
        self, kernel: Kernel, idx: np.ndarray, rows: np.ndarray, coef: np.ndarray, cols: np.ndarray
    ) -> np.ndarray:
        """``sum_k coef_k K(x_rows_k, x_cols)`` (positions), the part inside F0 x F0 read from the stored
        block ``K`` (a dense product, not a gather from kernel rows), the rest from ``kernel``."""
        return self._sum(kernel, idx, rows, coef, cols, self.where, lambda v: self.K @ v)

    def spread(
        self, kernel: Kernel, idx: np.ndarray, rows: np.ndarray, coef: np.ndarray, cols: np.ndarray
    ) -> np.ndarray:
        """:meth:`combo` for many columns: the part inside F0 x N from ``KN`` (one dense product over
        every column of N), the rest from ``kernel``; all from ``kernel`` when there is no ``KN``."""
        if self.KN is None or self.near_where is None:
            return kernel.combo(idx[rows], coef, idx[cols])
        KN = self.KN
        return self._sum(kernel, idx, rows, coef, cols, self.near_where, lambda v: v @ KN)

    def _sum(
        self,
        kernel: Kernel,
        idx: np.ndarray,
        rows: np.ndarray,
        coef: np.ndarray,
        cols: np.ndarray,
        col_where: np.ndarray,
        block_times: Callable[[np.ndarray], np.ndarray],
    ) -> np.ndarray:
        """The kernel sum of :meth:`combo`/:meth:`spread`: rows in F0 against the block's columns
        (``col_where``: each position's column in the block, -1 outside) from ``block_times`` (the block
        times a vector over F0, dense), the rest from ``kernel``."""
        wr, wc = self.where[rows], col_where[cols]
        ir, ic = wr >= 0, wc >= 0
        out = np.zeros(len(cols))
        if ir.any() and ic.any():
            v = np.zeros(len(self.rows))
            v[wr[ir]] = coef[ir]
            out[ic] = block_times(v)[wc[ic]]
        if not ir.all():
            out += kernel.combo(idx[rows[~ir]], coef[~ir], idx[cols])
        if ir.any() and not ic.all():
            out[~ic] += kernel.combo(idx[rows[ir]], coef[ir], idx[cols[~ic]])
        return out

    def step(
        self, kernel: Kernel, idx: np.ndarray, y: np.ndarray, F: np.ndarray, G: np.ndarray
    ) -> np.ndarray | None:
        """The Newton step d over the free rows F (positions) from the gradient G; None when F is too far
        from F0 or a block is singular (the caller then solves the system directly)."""
        w = self.where[F]
        in_s = w >= 0
        s_loc = np.flatnonzero(in_s)
        a_loc = np.flatnonzero(~in_s)
        n0 = len(self.rows)
        keep = np.zeros(n0, dtype=bool)
        keep[w[in_s]] = True
        R = np.flatnonzero(~keep)
        if len(s_loc) == 0 or len(R) + len(a_loc) > MAX_CHANGED:
            return None
        S = w[in_s]
        yF = y[F]
        rhs = np.column_stack([G[F], yF])
        B = np.empty((len(s_loc), 0))
        if len(a_loc):
            Fs, Fa = F[s_loc], F[a_loc]
            B = kernel.rows(idx[Fs], idx[Fa]) * np.outer(y[Fs], y[Fa])
        V = np.zeros((n0, B.shape[1] + 2))
        V[S, : B.shape[1]] = B
        V[S, B.shape[1] :] = rhs[s_loc]
        T = self.H @ V  # H_S. V_S (V is zero on R)
        if len(R):
            try:
                corr = np.linalg.solve(self.H[np.ix_(R, R)], T[R])
            except np.linalg.LinAlgError:
                return None
            T -= self.H[:, R] @ corr
        TS = T[S]  # (Q_SS)^-1 [B, rhs_S]
        z = np.empty((len(F), 2))
        if len(a_loc):
            W, u = TS[:, : B.shape[1]], TS[:, B.shape[1] :]
            Fa = F[a_loc]
            D = kernel.rows(idx[Fa], idx[Fa]) * np.outer(y[Fa], y[Fa])
            try:
                za = np.linalg.solve(D - B.T @ W, rhs[a_loc] - B.T @ u)
            except np.linalg.LinAlgError:
                return None
            z[a_loc] = za
            z[s_loc] = u - W @ za
        else:
            z[s_loc] = TS
        p, q = z[:, 0], z[:, 1]
        yq = float(yF @ q)
        if yq == 0 or not np.isfinite(yq):
            return None
        d = -(p - (float(yF @ p) / yq) * q)
        if not np.all(np.isfinite(d)) or np.max(np.abs(d)) > MAX_STEP:
            return None  # a nearly singular block: the direct solve decides
        return d
