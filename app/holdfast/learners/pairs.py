"""More than two classes with our own solver: one-vs-one machines, and refits of only those a row is in.

libsvm (and so scikit-learn's SVC) trains one two-class machine per pair of classes (a, b), a < b, on the
rows of those two classes, with class a as +1 (Knerr, Personnaz & Dreyfus 1990; Hsu & Lin 2002, "A
comparison of methods for multiclass support vector machines", IEEE TNN 13). A row enters only the k-1
machines of its own class, and removing it leaves every machine where its dual weight is 0 unchanged
(the same argument as for the support rows of one machine, Vapnik 1995) except where it sits at an end of
the machine's optimal intercept interval (``PairState.movers``), so a refit without it re-solves only the
machines where it is a support row or such a row, each warm-started
(:func:`holdfast.learners.warm.refit_without`).

Decision values follow scikit-learn's SVC with ``decision_function_shape="ovr"``: votes of the pairwise
machines (f_ab > 0 votes for a) plus the sum of the pairwise decision values squashed into (-1/3, 1/3)
(scikit-learn's ``_ovr_decision_function``; Pedregosa et al. 2011, JMLR 12). Predictions follow
``SVC.predict`` (libsvm's vote): the class with the most votes, the lowest class code on a tie
(:func:`vote_codes`; the arg-max of the ovr values would break a tie by the squashed sums instead).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from holdfast.learners import smo, warm
from holdfast.learners.face import FaceInverse


@dataclass
class PairState:
    """One one-vs-one machine (class a = +1 against class b = -1) and its full solution."""

    a: int
    b: int
    idx: np.ndarray
    ypm: np.ndarray
    c: np.ndarray
    alpha: np.ndarray
    grad: np.ndarray
    qd: np.ndarray
    rho: float
    #: rows (positions) a warm refit's SMO works on first: y f(x) < 1 + slack under the full machine
    near: np.ndarray | None = None
    #: rows (positions) with alpha = 0 whose removal can still move this machine's intercept
    #: (``svm_refit.intercept_movers``): a refit without one re-solves the machine instead of reusing it
    movers: np.ndarray | None = None
    #: training rows of the other classes (not in this machine), in training order
    outside: np.ndarray | None = None
    #: the inverse over the full machine's free rows for the refits' Newton steps (None: solved directly)
    face: FaceInverse | None = None

    def intercept_parts(self) -> tuple[np.ndarray, float]:
        """(decision values of the machine's own rows, intercept) from the solution: f = y (G + 1) - rho."""
        return self.ypm * (self.grad + 1.0) - self.rho, -self.rho

    def coef(self) -> tuple[np.ndarray, np.ndarray]:
        """(training rows of the support rows, y alpha of each)."""
        sv = np.flatnonzero(self.alpha > 0)
        return self.idx[sv], self.alpha[sv] * self.ypm[sv]


#: The machines' face inverses (``PairState.face``: two blocks of |free rows|^2 values each) are built while
#: their total stays within this; a machine beyond it solves its Newton steps directly (slower, the same
#: results). Ten classes make 45 machines.
PAIR_FACES_MAX_BYTES = 512 * 1024**2


def fit_pairs(
    kernel: smo.Kernel, y: np.ndarray, c_row: np.ndarray, n_classes: int, eps: float, slack: float = 0.2
) -> list[PairState]:
    """Solve every one-vs-one machine with our solver (cold start), in libsvm's pair order."""
    out = []
    budget = PAIR_FACES_MAX_BYTES
    for a in range(n_classes):
        for b in range(a + 1, n_classes):
            idx = np.flatnonzero((y == a) | (y == b))
            ypm = np.where(y[idx] == a, 1.0, -1.0)
            c = c_row[idx].astype(np.float64)
            alpha, grad, rho, _ = smo.fit_dual(kernel, idx, ypm, c, eps)
            near = ypm * (ypm * (grad + 1.0) - rho) < 1.0 + slack
            state = PairState(a, b, idx, ypm, c, alpha, grad, kernel.diag(idx), rho, near)
            state.outside = np.flatnonzero((y != a) & (y != b))
            size = 16 * int(np.count_nonzero((alpha > 0) & (alpha < c))) ** 2
            if size <= budget:
                state.face = FaceInverse.build(kernel, idx, ypm, alpha, c)
                budget -= size if state.face is not None else 0
            out.append(state)
    return out


def pair_decision(kernel: smo.Kernel, rows: np.ndarray, coef: np.ndarray, rho: float) -> np.ndarray:
    """f_ab(x) = sum_t y_t alpha_t K(x_t, x) - rho for every training row x."""
    return kernel.combo(rows, coef, None) - rho


def ovr_from_ovo(ovo: np.ndarray, n_classes: int) -> np.ndarray:
    """scikit-learn's ovr-shaped decision values from the pairwise ones (columns in libsvm's pair order)."""
    votes = np.zeros((ovo.shape[0], n_classes))
    conf = np.zeros((ovo.shape[0], n_classes))
    k = 0
    for a in range(n_classes):
        for b in range(a + 1, n_classes):
            conf[:, a] += ovo[:, k]
            conf[:, b] -= ovo[:, k]
            votes[ovo[:, k] >= 0, a] += 1
            votes[ovo[:, k] < 0, b] += 1
            k += 1
    return votes + conf / (3 * (np.abs(conf) + 1))


def vote_codes(ovr: np.ndarray) -> np.ndarray:
    """libsvm's prediction from ovr-shaped decision values: most votes, the lowest class code on a tie.

    The ovr values are votes plus a term in (-1/3, 1/3), so rounding recovers the votes (Chang & Lin
    2011, "LIBSVM", ACM TIST 2(3), section 7: "in case that two classes have identical votes ... simply
    choose the class appearing first"; np.argmax returns the first maximum)."""
    return np.argmax(np.rint(ovr), axis=1).astype(np.int64)


@dataclass
class PairModel:
    """The one-vs-one machines as the parts of a fitted SVC that holdfast reads (``support_``,
    ``dual_coef_`` with each support row's largest weight, ``classes_``, ``decision_function``)."""

    pairs: list[tuple[np.ndarray, np.ndarray, float]]
    n_classes: int
    support_: np.ndarray
    dual_coef_: np.ndarray
    classes_: np.ndarray
    #: ovr-shaped decision values of the training rows, and (kernel, gamma, degree, coef0)
    train_decision: np.ndarray
    kernel_args: tuple[str, float, int, float]

    @classmethod
    def from_states(
        cls,
        states: list[PairState],
        n_classes: int,
        m: int,
        ovo_full: np.ndarray,
        args: tuple[str, float, int, float],
    ) -> PairModel:
        weight = np.zeros(m)
        pairs = []
        for s in states:
            np.maximum.at(weight, s.idx, s.alpha)
            rows, coef = s.coef()
            pairs.append((rows, coef, s.rho))
        sv = np.flatnonzero(weight > 0)
        train = ovr_from_ovo(ovo_full, n_classes)
        return cls(pairs, n_classes, sv, weight[sv][None, :], np.arange(n_classes), train, args)

    def decision_function(self, K_cross: np.ndarray) -> np.ndarray:
        """ovr-shaped decision values from kernel values of rows against the training rows."""
        ovo = np.column_stack([K_cross[:, rows] @ coef - rho for rows, coef, rho in self.pairs])
        return ovr_from_ovo(ovo, self.n_classes)

    def decision_rows(self, X: np.ndarray, X_train: np.ndarray) -> np.ndarray:
        """ovr-shaped decision values of new rows ``X`` from the kernel values against support rows only."""
        from holdfast.learners.kernels import kernel_matrix

        ovo = np.empty((len(X), len(self.pairs)))
        for k, (rows, coef, rho) in enumerate(self.pairs):
            for s in range(0, len(X), 2048):
                ovo[s : s + 2048, k] = (
                    kernel_matrix(X[s : s + 2048], X_train[rows], *self.kernel_args) @ coef - rho
                )
        return ovr_from_ovo(ovo, self.n_classes)


def refitted_decision(
    kernel: smo.Kernel, s: PairState, alpha: np.ndarray, grad: np.ndarray, rho: float, full: np.ndarray
) -> np.ndarray:
    """A refitted machine's decision values of every training row: for its own rows from the solver's
    gradient (f = y (G + 1) - rho, as for two classes), for the other classes' rows as the full machine's
    values plus the change, sum over the rows whose alpha changed of their y delta-alpha K(x_t, x), and the
    change of the intercept (O(changed rows x m) instead of O(support rows x m); the same values up to
    rounding)."""
    assert s.outside is not None  # set by fit_pairs
    out = np.empty(len(full))
    out[s.idx] = s.ypm * (grad + 1.0) - rho
    outside = s.outside
    if len(outside):
        moved = np.flatnonzero(alpha != s.alpha)
        step = (alpha[moved] - s.alpha[moved]) * s.ypm[moved]
        out[outside] = full[outside] + kernel.combo(s.idx[moved], step, outside) - (rho - s.rho)
    return out


def tied_machines(
    states: list[PairState], ovo_full: np.ndarray, tie: object, unique: object | None = None
) -> np.ndarray:
    """Per machine: a full-model decision value within ``tie(sum alpha, max K)`` of 0, or (with
    ``unique``) an intercept that is not unique, where libsvm's solve of the same machine may pick another
    one (see :func:`refit_pairs`)."""
    out = np.array(
        [
            np.min(np.abs(ovo_full[:, k])) < tie(float(s.alpha.sum()), float(s.qd.max()))  # type: ignore[operator]
            for k, s in enumerate(states)
        ],
        dtype=bool,
    )
    if unique is not None:
        flat = [not unique(s.ypm, s.ypm * (s.grad + 1.0), s.c, -s.rho) for s in states]  # type: ignore[operator]
        out |= np.array(flat, dtype=bool)
    return out


def refit_pairs(
    kernel: smo.Kernel,
    states: list[PairState],
    ovo_full: np.ndarray,
    row: int,
    eps: float,
    unique: object,
    tie: object,
    tied: np.ndarray | None = None,
) -> tuple[np.ndarray, list[int]]:
    """The ovo decision values of every training row after a refit without ``row``, and the machines whose
    values must come from libsvm instead.

    The machines where ``row`` has a non-zero weight, or whose intercept it can move
    (``PairState.movers``), are warm-started without it (Newton steps from ``PairState.face``; decision
    values by :func:`refitted_decision`); the others are reused. A machine goes to libsvm when its refit's
    intercept is not unique (``unique(ypm, g, c, intercept)`` is False) or one of its decision values is
    within ``tie(sum alpha, max K)`` of 0, and when it is ``tied`` (:func:`tied_machines`), refitted or
    not: whether libsvm's solve of the same machine rounds a value at a tie to the same sign is not known
    (an exact tie such as w = 0, b = 0 on a 1-D grid: libsvm's vote at 0 goes to the second class). The
    caller fills those columns (``SVMRefitProblem._libsvm_machine``); the other machines' values are the
    optimum's, which are libsvm's to within the tie allowance."""
    ovo = ovo_full.copy()
    ask: list[int] = []
    for k, s in enumerate(states):
        pos = int(np.searchsorted(s.idx, row))
        inside = pos < len(s.idx) and s.idx[pos] == row
        mover = inside and s.movers is not None and pos in s.movers
        if not inside or (s.alpha[pos] <= 0 and not mover):
            if tied is not None and tied[k]:
                ask.append(k)
            continue
        alpha, grad, c = s.alpha.copy(), s.grad.copy(), s.c.copy()
        args = (eps, False, s.qd, s.near, s.face)
        rho, _ = warm.refit_without(kernel, s.idx, s.ypm, c, alpha, grad, pos, *args)
        keep = np.arange(len(s.idx)) != pos
        g = (s.ypm * (grad + 1.0))[keep]
        if not unique(s.ypm[keep], g, c[keep], -rho):  # type: ignore[operator]
            ask.append(k)
            continue
        ovo[:, k] = refitted_decision(kernel, s, alpha, grad, rho, ovo_full[:, k])
        if np.min(np.abs(ovo[:, k])) < tie(float(alpha.sum()), float(s.qd.max())):  # type: ignore[operator]
            ask.append(k)
    return ovo, ask
