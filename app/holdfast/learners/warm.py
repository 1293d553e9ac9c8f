"""Warm-started refits without one row: alpha seeding, Newton steps on the free set, then SMO.

A refit without row i starts from the full solution (alpha seeding, DeCoste & Wagstaff 2000, "Alpha seeding
for support vector machines", KDD): alpha_i's weight is moved onto other rows so that the start is feasible,
the gradient is updated from the changed rows' kernel rows only, and the solver of
:mod:`holdfast.learners.smo` finishes the job to the same stopping rule as a cold solve.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from holdfast.learners.face import FaceInverse
from holdfast.learners.smo import Kernel, certify, extremes, gradient, regrow, rho, smo_sets, solve


def _shift(
    alpha: np.ndarray, bound: np.ndarray, order: np.ndarray, amount: float, sign: float
) -> tuple[list[int], list[float], float]:
    """Move up to ``amount`` of weight onto (sign +1, up to ``bound``) or off (sign -1, down to 0) the
    rows ``order``, first rows first; returns the changed rows, their alpha changes and what is left."""
    room = bound[order] - alpha[order] if sign > 0 else alpha[order]
    take = np.minimum(room, np.maximum(amount - (np.cumsum(room) - room), 0.0))
    used = take > 0
    rows, deltas = [], []
    for t, d in zip(order[used], take[used], strict=True):
        old = alpha[t]
        alpha[t] = min(bound[t], old + d) if sign > 0 else max(0.0, old - d)
        rows.append(int(t))
        deltas.append(float(alpha[t] - old))
    return rows, deltas, amount - float(take.sum())


def seed_without(
    kernel: Kernel,
    idx: np.ndarray,
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    pos: int,
    all_rows: bool = False,
) -> int:
    """Alpha seeding for the problem without position ``pos`` (DeCoste & Wagstaff 2000, KDD).

    Sets ``alpha[pos] = 0`` and ``C[pos] = 0``; to keep ``y'a = 0``, the same weight is taken off rows of
    the other class, nearest first (largest K(x_pos, x_t)): the rows that were pulling against row
    ``pos`` near it (measured at 5,000 rows: 20% less time per refit than putting the weight onto rows of
    the same class, the same results). If they hold too little, the rest goes onto rows of the same class,
    nearest first, each up to its box. Only the changed rows' kernel rows update the gradient (O(n)
    each). Arrays are changed in place; returns the number of rows whose alpha changed.
    """
    a = float(alpha[pos])
    C[pos] = 0.0
    if a <= 0:
        alpha[pos] = 0.0
        return 0
    k_pos = kernel.rows(np.array([idx[pos]]), None if all_rows else idx)[0]
    alpha[pos] = 0.0
    other = np.flatnonzero((y != y[pos]) & (alpha > 0))
    changed, deltas, rest = _shift(alpha, C, other[np.argsort(-k_pos[other], kind="stable")], a, -1.0)
    if rest > 1e-15 * max(1.0, a):
        same = np.flatnonzero((y == y[pos]) & (alpha < C))
        more, more_d, _ = _shift(alpha, C, same[np.argsort(-k_pos[same], kind="stable")], rest, 1.0)
        changed += more
        deltas += more_d
    rows = np.array([pos, *changed], dtype=np.int64)
    step = np.array([-a, *deltas]) * y[rows]
    G += y * kernel.combo(idx[rows], step, None if all_rows else idx)
    return len(rows)


#: Largest free set the Newton step of :func:`polish` solves directly ((n+1)^2 system).
POLISH_MAX_FREE = 1500
#: Newton steps of one :func:`polish` call (each after the first on a smaller face).
POLISH_STEPS = 8
#: Newton-then-short-SMO rounds of a warm refit before a plain SMO run finishes it.
POLISH_ROUNDS = 12
#: The violation SMO reaches before the first Newton step of a warm refit.
LOOSE_EPS = 1e-2
#: Below ``SMALL_ACTIVE_ROWS`` active rows, SMO goes further before the first Newton step and runs longer
#: between steps: its updates are cheap there, and the steps' Python work holds the GIL, which the refits
#: share across threads (2,000 rows, two threads: 1.8 s of LOO with the large-problem rule, 1.4 s with
#: this one).
LOOSE_EPS_SMALL = 3e-3
SMALL_ACTIVE_ROWS = 4000
#: SMO pair updates between two Newton steps. A fixed number, not one growing with the active rows: the
#: steps land on the optimum once the free set is right, and SMO's part is only to move rows on or off
#: their bounds (per refit, single thread: 102 -> 77 ms at 20,000 RBF rows, 1.2 s -> 0.41 s at 50,000,
#: 39 -> 30 ms at 10,000; the same results; the old rule was 50 + active rows / 20, 3e-3 and 4 rounds).
SHORT_ITERATIONS = 50
#: Times the active rows of a warm refit may grow (rows outside them that violate the stopping rule join,
#: and Newton steps go on over the larger set) before a plain SMO run over every row finishes it.
GROW_ROUNDS = 4


def polish(
    kernel: Kernel,
    idx: np.ndarray,
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    all_rows: bool = False,
    face: FaceInverse | None = None,
    active: np.ndarray | None = None,
    acc: tuple[np.ndarray, np.ndarray] | None = None,
    max_steps: int = POLISH_STEPS,
) -> bool:
    """Newton steps on the face of the box the current alpha lies on (rows at 0 or C stay there).

    On that face the dual is an equality-constrained quadratic: ``Q_FF d + b y_F = -G_F``, ``y_F'd = 0``
    over the free rows F (the KKT system of the face problem; e.g. Nocedal & Wright 2006, *Numerical
    Optimization*, section 16.1). When SMO has found the right free set, one step lands on the optimum to
    rounding error, which saves SMO's slow linear tail (most of its iterations are spent between a
    violation of 1e-3 and 1e-8). If a step leaves the box, only the part up to the first bound is taken
    (the objective still decreases along it: a convex quadratic minimised at the full step), that row
    leaves the face, and the next step solves the smaller face (an active-set method), up to
    ``max_steps`` steps. The faces only shrink, so between steps only the first face's gradient is kept
    current (|F|^2 each); the other rows' gradient is updated once at the end from the summed change (all
    rows at once when the first step was the only one). The
    caller always finishes with :func:`solve` at the target tolerance, so the result does not depend on
    these steps succeeding. Returns True when a full step was taken. ``all_rows``: ``idx`` is every
    training row in order (kernel rows are then plain rows of K). ``face``: the full solution's face
    inverse (:class:`holdfast.learners.face.FaceInverse`), which gives the same step in O(|F|^2) when the
    free set is close to the full solution's. ``active``/``acc``: only the gradient of the rows
    ``active`` (which hold every free row) is updated, and each row's change of y a is added to
    ``acc`` for a later update of the others (see :func:`finish`).
    """
    F0 = np.flatnonzero((alpha > 0) & (alpha < C))
    if len(F0) == 0:
        return False
    moved = np.zeros(len(F0))  # summed change of y a over F0
    full = False
    steps = 0
    last: tuple[np.ndarray, np.ndarray] | None = None  # the last step (F, change of y a), not yet in G[F0]
    f0_current = False  # G[F0] already holds some step
    for _ in range(max_steps):
        if last is not None:
            G[F0] += y[F0] * _face_sum(kernel, idx, face, *last, F0)
            last = None
            f0_current = True
        F = np.flatnonzero((alpha > 0) & (alpha < C))
        d = _newton_step(kernel, idx, y, C, alpha, G, F, face)
        if d is None:
            break
        full, new = d
        dy = (new - alpha[F]) * y[F]
        alpha[F] = new
        moved[np.searchsorted(F0, F)] += dy
        last = (F, dy)
        steps += 1
        if full:
            break
    if steps == 0:
        return False
    if not f0_current:  # a single step over F0, in no gradient yet: one update of every row's gradient
        rest = F0[:0]
        rows, dy = F0, moved
    else:
        if last is not None:
            G[F0] += y[F0] * _face_sum(kernel, idx, face, *last, F0)
        nz = np.flatnonzero(moved != 0.0)
        rows, dy = F0[nz], moved[nz]
        rest = F0
    if active is not None and acc is not None:
        cols = np.setdiff1d(active, rest, assume_unique=True) if len(rest) else active
        if face is not None:
            G[cols] += y[cols] * face.spread(kernel, idx, rows, dy, cols)
        else:
            G[cols] += y[cols] * kernel.combo(idx[rows], dy, idx[cols])
        acc[0][rows] += dy
        acc[1][rows] = True
    elif len(rest) == 0 and all_rows:
        G += y * kernel.combo(idx[rows], dy, None)
    else:
        cols = np.setdiff1d(np.arange(len(idx)), rest, assume_unique=True)
        G[cols] += y[cols] * kernel.combo(idx[rows], dy, idx[cols])
    return full


def _face_sum(
    kernel: Kernel,
    idx: np.ndarray,
    face: FaceInverse | None,
    rows: np.ndarray,
    coef: np.ndarray,
    cols: np.ndarray,
) -> np.ndarray:
    """``sum_k coef_k K(x_rows_k, x_cols)``: from the face's stored block when the kernel rows are not
    plain rows of a precomputed matrix (they would be gathered from scattered places in memory)."""
    if face is not None and not kernel.precomputed:
        return face.combo(kernel, idx, rows, coef, cols)
    return kernel.combo(idx[rows], coef, idx[cols])


def _newton_step(
    kernel: Kernel,
    idx: np.ndarray,
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    F: np.ndarray,
    face: FaceInverse | None,
) -> tuple[bool, np.ndarray] | None:
    """One step of :func:`polish` over the free rows F: (full step taken, new alpha_F), the step cut at
    the first bound it reaches (that row then lies exactly on it); None when there is no step to take."""
    n = len(F)
    if n == 0:
        return None
    yF = y[F]
    d = face.step(kernel, idx, y, F, G) if face is not None else None
    if d is None:
        if n > POLISH_MAX_FREE:
            return None
        d = _direct_step(kernel, idx, yF, F, G)
        if d is None:
            return None
    d = d - yF * (float(yF @ d) / n)  # y_F'd = 0 to rounding: the step keeps y'a = 0 (feasibility)
    new = alpha[F] + d
    full = bool(np.all(new >= 0) and np.all(new <= C[F]))
    if not full:
        with np.errstate(divide="ignore", invalid="ignore"):
            lim = np.where(d < 0, -alpha[F] / d, np.where(d > 0, (C[F] - alpha[F]) / d, np.inf))
        tau = float(np.min(lim))
        if not tau > 0:
            return None
        new = np.clip(alpha[F] + tau * d, 0.0, C[F])
    delta = new - alpha[F]
    if abs(float(yF @ delta)) > 1e-12 * max(1.0, float(np.sum(C[F]))):
        return None  # a step from a nearly singular system: rounding would move y'a; SMO goes on instead
    return full, new


def _direct_step(
    kernel: Kernel, idx: np.ndarray, yF: np.ndarray, F: np.ndarray, G: np.ndarray
) -> np.ndarray | None:
    """The Newton step of :func:`polish` from the bordered KKT system, solved afresh."""
    n = len(F)
    A = np.empty((n + 1, n + 1))
    A[:n, :n] = kernel.rows(idx[F], idx[F]) * np.outer(yF, yF)
    A[:n, n] = yF
    A[n, :n] = yF
    A[n, n] = 0.0
    rhs = np.concatenate([-G[F], [0.0]])
    try:
        sol = np.linalg.solve(A, rhs)
    except np.linalg.LinAlgError:
        sol = np.linalg.lstsq(A, rhs, rcond=None)[0]
    d = sol[:n]
    return d if np.all(np.isfinite(d)) else None


#: Largest share of the rows outside the active set that a certificate may leave in doubt: those rows get
#: their gradient computed exactly (a sum over the changed rows' kernel values at their places), the rest
#: stay behind. With more, bringing every row up to date (``regrow``, whole kernel rows) costs less.
DOUBT_SHARE = 0.25


@dataclass
class Certificate:
    """Lets :func:`finish` skip the last update of the rows outside the active set when
    :func:`holdfast.learners.smo.certify` shows it cannot change anything asked of them.

    ``alpha0``/``G0``: the solution the refit started from (the full model) and its exact gradient;
    ``zone``: how far from 0 a decision value, and from 1 a margin y f, must stay for its row to be left
    (the caller's allowance for ties and for the intercept's kinks). After :func:`finish`, ``stale``
    marks the rows left with their gradient from ``G0``, within ``radius`` sqrt(K(x, x)) of the true one
    (None: every row is current), and :meth:`complete` brings them up to date. Rows the certificate
    leaves in doubt get their exact gradient (:meth:`settle`).
    """

    alpha0: np.ndarray
    G0: np.ndarray
    zone: float
    radius: float = 0.0
    stale: np.ndarray | None = None
    _active: np.ndarray = field(default_factory=lambda: np.empty(0, dtype=np.int64))
    _acc: tuple[np.ndarray, np.ndarray] | None = None
    _stash: np.ndarray | None = None

    def settle(
        self,
        kernel: Kernel,
        idx: np.ndarray,
        y: np.ndarray,
        C: np.ndarray,
        alpha: np.ndarray,
        G: np.ndarray,
        eps: float,
        QD: np.ndarray,
        active: np.ndarray,
        acc: tuple[np.ndarray, np.ndarray],
    ) -> bool:
        """After SMO on ``active`` (deferred changes in ``acc``): True when the rows outside it need no
        update (``certify``), or only the rows it leaves in doubt (at most ``DOUBT_SHARE`` of them), whose
        exact gradient ``G0 + Q(a - a0)`` is computed and which meet the stopping rule with the active
        rows (neither raising m(a) nor lowering M(a)). Then ``G`` holds ``G0`` on the ``stale`` rows and
        exact values elsewhere. False: nothing changed, the caller updates every row."""
        doubt = np.zeros(len(idx), dtype=bool)
        radius = certify(y, C, alpha, G, self.alpha0, self.G0, QD, eps, active, self.zone, doubt)
        outside = len(idx) - len(active)
        if radius < 0 or int(doubt.sum()) > DOUBT_SHARE * outside:
            return False
        rows = np.flatnonzero(doubt)
        exact = self.G0[rows]
        if len(rows):
            moved = np.flatnonzero(alpha != self.alpha0)  # all active (``certify`` checked)
            step = (alpha[moved] - self.alpha0[moved]) * y[moved]
            exact = exact + y[rows] * kernel.combo(idx[moved], step, idx[rows])
            up, low = smo_sets(y[rows], C[rows], alpha[rows])
            g1, g2 = extremes(y, C, alpha, G, active)
            v = -y[rows] * exact
            if np.any(up & (v > g1)) or np.any(low & (v < -g2)):
                return False  # a row that must join: the caller's regrow takes it in
        self.radius = radius
        self.stale = np.ones(len(idx), dtype=bool)
        self.stale[active] = False
        self._stash = G[self.stale].copy()  # what the changes deferred in ``acc`` apply to
        self.stale[rows] = False
        G[self.stale] = self.G0[self.stale]
        G[rows] = exact
        self._active, self._acc = active, acc
        return True

    def complete(
        self,
        kernel: Kernel,
        idx: np.ndarray,
        y: np.ndarray,
        C: np.ndarray,
        alpha: np.ndarray,
        G: np.ndarray,
        eps: float,
        QD: np.ndarray,
    ) -> None:
        """The skipped update after all (``regrow``), and SMO in the unlikely case a row then violates the
        stopping rule; afterwards every row's gradient is current and ``stale`` is None."""
        if self.stale is None or self._acc is None:
            return
        assert self._stash is not None
        outside = np.ones(len(idx), dtype=bool)
        outside[self._active] = False
        G[outside] = self._stash  # the values the deferred changes in ``_acc`` apply to
        rows = regrow(kernel, idx, y, C, alpha, G, eps, self._active, self._acc)
        if len(rows):
            solve(kernel, idx, y, C, alpha, G, eps, QD, active=rows, acc=self._acc)
        self.stale, self.radius, self._acc, self._stash = None, 0.0, None, None


def refit_without(
    kernel: Kernel,
    idx: np.ndarray,
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    pos: int,
    eps: float,
    all_rows: bool = False,
    QD: np.ndarray | None = None,
    near: np.ndarray | None = None,
    face: FaceInverse | None = None,
    cert: Certificate | None = None,
) -> tuple[float, int]:
    """Warm-started solve of the problem without position ``pos``; arrays changed in place.

    Alpha seeding (:func:`seed_without`), SMO to a loose violation (``LOOSE_EPS``), then rounds of Newton
    steps on the free set (:func:`polish`, an active-set method: a step stopped by a bound fixes that row
    and the next step solves the smaller face) each followed by a short SMO run at ``eps``; the last word is
    always an unlimited SMO run at ``eps``, so the result meets libsvm's stopping rule whatever the
    Newton steps did. ``near``: rows (boolean per position) SMO works on first besides those with a
    non-zero alpha after the seed (shrinking; see ``_smo``). ``cert``: see :func:`finish`. Returns (rho,
    SMO iterations).
    """
    if QD is None:
        QD = kernel.diag(idx)
    seed_without(kernel, idx, y, C, alpha, G, pos, all_rows)
    its = finish(kernel, idx, y, C, alpha, G, eps, all_rows, QD, near, face, cert)
    return rho(y, C, alpha, G, pos), its


def finish(
    kernel: Kernel,
    idx: np.ndarray,
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    eps: float,
    all_rows: bool,
    QD: np.ndarray,
    near: np.ndarray | None,
    face: FaceInverse | None = None,
    cert: Certificate | None = None,
) -> int:
    """From a feasible ``alpha`` near the optimum with its gradient: SMO to a loose violation, rounds of
    Newton steps each followed by a short SMO run, and an unlimited SMO run at ``eps`` as the last word
    (see :func:`refit_without`). Arrays changed in place; returns the SMO iterations.

    With ``near``, the work is done on the active rows A (``near`` plus the free rows), keeping only their
    gradient up to date and accumulating each row's change of y a. Then the other rows' gradient is brought
    up to date once (O(changed rows x n), instead of once per step; :func:`holdfast.learners.smo.regrow`):
    if every row meets the stopping rule, that is the answer; otherwise the rows that violate it with an
    active row join A and the rounds of Newton steps go on over the larger set (up to ``GROW_ROUNDS``
    times; plain SMO alone needed 20,000+ pair updates after one row joined). The last run goes on over
    all rows until every row meets the stopping rule (see ``smo._smo``). Without ``near`` every row is
    active throughout.

    With ``cert``, the other rows' update is skipped when :func:`holdfast.learners.smo.certify` shows it
    cannot change anything asked of them (stopping rule, signs, margins): their gradient is then left
    behind by at most ``cert.radius`` (times sqrt K(x, x)) and ``cert`` says which rows, and can bring
    them up to date (:meth:`Certificate.complete`)."""
    active = None
    if near is not None:
        work = near | ((alpha > 0) & (alpha < C))
        if cert is not None:
            work |= alpha != cert.alpha0  # the rows the seed changed (``certify`` needs them current)
        active = np.flatnonzero(work)
    acc = None if active is None else (np.zeros(len(idx)), np.zeros(len(idx), dtype=np.bool_))
    its = 0
    for _ in range(GROW_ROUNDS):
        n_act = len(idx) if active is None else len(active)
        loose = LOOSE_EPS if n_act >= SMALL_ACTIVE_ROWS else LOOSE_EPS_SMALL
        its += solve(kernel, idx, y, C, alpha, G, max(eps, loose), QD, active=active, acc=acc, defer=True)
        for _ in range(POLISH_ROUNDS):
            polish(kernel, idx, y, C, alpha, G, all_rows, face, active, acc)
            short = SHORT_ITERATIONS if n_act >= SMALL_ACTIVE_ROWS else SHORT_ITERATIONS + n_act // 20
            more = solve(kernel, idx, y, C, alpha, G, eps, QD, short, active, acc, True)
            its += more
            if more < short:
                break
        if active is None or acc is None or len(active) == len(idx):
            break
        if cert is not None and cert.settle(kernel, idx, y, C, alpha, G, eps, QD, active, acc):
            return its
        active = regrow(kernel, idx, y, C, alpha, G, eps, active, acc)
        if len(active) == 0:  # every row meets the stopping rule, with every row's gradient up to date
            return its
    return its + solve(kernel, idx, y, C, alpha, G, eps, QD, active=active, acc=acc)


def tighten(
    kernel: Kernel, y: np.ndarray, C: np.ndarray, alpha: np.ndarray, eps: float, slack: float = 0.2
) -> tuple[np.ndarray, np.ndarray, float]:
    """Take a solution of the whole problem from another solver (libsvm's, to its own tolerance) to the
    optimum at ``eps`` with :func:`finish`: the gradient is computed afresh from the support rows, and
    SMO works first on the support rows and rows with y f(x) < 1 + ``slack``. Returns (alpha, G, rho)."""
    m = len(y)
    idx = np.arange(m)
    alpha = np.clip(alpha, 0.0, C)
    G = gradient(kernel, idx, y, alpha)
    QD = kernel.diag(idx)
    near = (G + 1.0) - y * rho(y, C, alpha, G) < 1.0 + slack  # y f(x) = y y (G + 1) - y rho
    finish(kernel, idx, y, C, alpha, G, eps, True, QD, near)
    G = gradient(kernel, idx, y, alpha)
    solve(kernel, idx, y, C, alpha, G, eps, QD)  # usually 0 iterations: the fresh gradient is still optimal
    return alpha, G, rho(y, C, alpha, G)
