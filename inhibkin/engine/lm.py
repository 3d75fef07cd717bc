"""A batched Levenberg–Marquardt solver: many independent least-squares problems at once.

Every problem shares one model but has its own data, length (a mask over padded
arrays), bounds, damping and convergence. The arithmetic is numpy on stacked arrays;
a problem that has converged (or failed) leaves the working set, so the cost follows
the problems still running. Each problem's result depends only on its own data, never
on which other problems share the batch or how the batch is cut into chunks.

The step solves (JᵀJ + λ·D) δ = Jᵀr with D the running maximum of diag(JᵀJ), as
MINPACK's LM scales its trust region (Moré 1978, "The Levenberg–Marquardt algorithm:
implementation and theory", in Numerical Analysis, Springer LNM 630). λ follows the gain-ratio
rule of Nielsen (1999), "Damping parameter in Marquardt's method", IMM-REP-1999-05, DTU.
Bounds are kept by projection: a parameter at a bound whose descent direction points
outward is held there for the step, and every trial point is clipped into the box.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "LMResult",
    "solve",
    "STATUS_REASONS",
    "CONVERGED",
    "FAILED_ITERATIONS",
    "FAILED_DATA",
    "FAILED_TOO_FEW",
    "FAILED_START",
    "FAILED_STALLED",
    "FTOL",
    "XTOL",
    "GTOL",
    "MAX_ITERATIONS",
]

#: Relative reduction of the SSR (actual and predicted) below which a problem has converged.
FTOL = 1e-15
#: Step size, relative to 1 + |parameter|, below which a problem has converged.
XTOL = 1e-11
#: Largest cosine between the residual vector and a Jacobian column at convergence.
GTOL = 1e-11
#: Iteration bound per problem.
MAX_ITERATIONS = 200

# Starting damping, relative to the diagonal of JᵀJ; small because the automatic starts
# are usually close enough for near-Gauss–Newton steps.
_LAMBDA_START = 1e-3
# Damping beyond which no step can reduce the SSR at double precision.
_LAMBDA_MAX = 1e16
# A stalled problem whose gradient cosine is below this counts as converged at machine
# precision (its SSR cannot be reduced in floating point); above it, as failed.
_STALL_GTOL = 1e-6
# Pivots of the scaled (unit-diagonal) normal matrix below this mean it is singular.
_SINGULAR_PIVOT = 1e-15
# Compact the working arrays when fewer than this fraction of their rows still run.
_COMPACT_FRACTION = 0.7
# Problems run in blocks of about this many padded points, so that a block's arrays stay
# in the processor's cache (a 100,000 × 10 array does not, and every numpy pass over it
# then waits on memory: three times slower per point, measured).
_BLOCK_POINTS = 65_536
# Iterations a block runs on its own; the few problems still running after that from all
# blocks continue together, so the slow tail pays the per-iteration overhead once. Most 4PL
# curves finish in 5–9 iterations; past 12 a block holds a few dozen problems and its numpy
# calls are all overhead (30 here cost about 10 % more time on the benchmark, measured).
_BLOCK_ITERATIONS = 12

# Largest |gain ratio − 1| at which a Newton step counts as in its quadratic regime.
_NEWTON_RHO = 0.1
# Newton's gains shrink about quadratically in its regime, so after an accepted Newton step
# (gain ratio within _NEWTON_RHO of 1) predicting a relative gain below
# ftol**_NEWTON_FTOL_POWER the next would gain about ftol: the problem stops one evaluation
# earlier. On 100,000 benchmark curves the 4PL estimates moved by at most 2e-8 relative where
# log_ic50 lies inside the tested range, 2.5e-6 outside it (measured); power 2/3 moved them
# 1.7e-7 inside, 1/2 by 2e-5, too far.
_NEWTON_FTOL_POWER = 0.75

# Status codes: positive converged, negative failed.
CONVERGED_FTOL = 1
CONVERGED_XTOL = 2
CONVERGED_GTOL = 3
CONVERGED_EXACT = 4
CONVERGED_PRECISION = 5
FAILED_ITERATIONS = -1
FAILED_DATA = -2
FAILED_TOO_FEW = -3
FAILED_START = -4
FAILED_STALLED = -5
_RUNNING = 0
#: Any status above zero is a converged problem.
CONVERGED = (CONVERGED_FTOL, CONVERGED_XTOL, CONVERGED_GTOL, CONVERGED_EXACT,
             CONVERGED_PRECISION)

STATUS_REASONS = {
    CONVERGED_FTOL: "converged: relative reduction of the SSR below ftol",
    CONVERGED_XTOL: "converged: relative step below xtol",
    CONVERGED_GTOL: "converged: residuals orthogonal to the Jacobian (gtol)",
    CONVERGED_EXACT: "converged: residuals are zero",
    CONVERGED_PRECISION: "converged: the SSR cannot be reduced further in double precision",
    FAILED_ITERATIONS: "failed: iteration limit reached",
    FAILED_DATA: "failed: non-finite value (NaN or inf) among the data",
    FAILED_TOO_FEW: "failed: no more points than free parameters",
    FAILED_START: "failed: the residuals are not finite at the starting values",
    FAILED_STALLED: "failed: no step reduces the SSR away from a stationary point",
    _RUNNING: "not run",
}


@dataclass(frozen=True)
class LMResult:
    """Solutions of a batch of least-squares problems.

    Attributes
    ----------
    theta : numpy.ndarray, shape (B, k)
        Parameters at the solution (the solver's coordinates, e.g. log-parameters);
        the starting values where a problem failed before its first step.
    ssr : numpy.ndarray, shape (B,)
        Weighted residual sum of squares at ``theta`` (NaN when not computable).
    status : numpy.ndarray of int8, shape (B,)
        Positive: converged; negative: failed; see :data:`STATUS_REASONS`.
    iterations : numpy.ndarray of int, shape (B,)
        Trial steps taken.
    n_obs, n_free : numpy.ndarray of int, shape (B,)
        Points used and parameters fitted per problem.
    covariance : numpy.ndarray, shape (B, k, k)
        (JᵀJ)⁻¹ · SSR/max(1, n_obs − n_free) at the solution, NaN where singular,
        not converged, or for a parameter that was held fixed.
    free : numpy.ndarray of bool, shape (B, k)
        Which parameters were fitted.
    """

    theta: np.ndarray
    ssr: np.ndarray
    status: np.ndarray
    iterations: np.ndarray
    n_obs: np.ndarray
    n_free: np.ndarray
    covariance: np.ndarray = field(repr=False)
    free: np.ndarray = field(repr=False)

    @property
    def converged(self) -> np.ndarray:
        """Boolean per problem."""
        return self.status > 0

    @property
    def reason(self) -> np.ndarray:
        """The status of each problem in words (object array of str)."""
        table = np.array([STATUS_REASONS[c] for c in sorted(STATUS_REASONS)], dtype=object)
        return table[np.searchsorted(sorted(STATUS_REASONS), self.status)]

    @property
    def std_err(self) -> np.ndarray:
        """Square roots of the covariance diagonal, shape (B, k)."""
        with np.errstate(invalid="ignore"):
            return np.sqrt(np.diagonal(self.covariance, axis1=1, axis2=2))


def _cholesky(matrix):
    """Cholesky factors of a stack of small SPD matrices laid out (k, k, b).

    Returns (low, ok): ``low[r][j]`` (r ≥ j) are 1-D arrays over the batch; ok is False
    where a pivot is not positive. Written out element by element on contiguous batch
    vectors, so that it is fast for k ≤ a handful and one bad problem cannot raise for
    the whole batch as ``numpy.linalg`` would.
    """
    k = matrix.shape[0]
    low = [[None] * k for _ in range(k)]
    ok = np.ones(matrix.shape[2], dtype=bool)
    for j in range(k):
        pivot = matrix[j, j].copy()
        for p in range(j):
            pivot -= low[j][p] * low[j][p]
        ok &= pivot > 0
        low[j][j] = np.sqrt(np.where(pivot > 0, pivot, 1.0))
        for r in range(j + 1, k):
            acc = matrix[r, j].copy()
            for p in range(j):
                acc -= low[r][p] * low[j][p]
            low[r][j] = acc / low[j][j]
    return low, ok


def _substitute(low, rhs):
    """Solve L Lᵀ x = rhs (rhs of shape (k, b)) with the factors of :func:`_cholesky`."""
    k = rhs.shape[0]
    z = [None] * k
    for j in range(k):
        acc = rhs[j].copy()
        for p in range(j):
            acc -= low[j][p] * z[p]
        z[j] = acc / low[j][j]
    x = [None] * k
    for j in reversed(range(k)):
        acc = z[j]
        for p in range(j + 1, k):
            acc = acc - low[p][j] * x[p]
        x[j] = acc / low[j][j]
    return np.stack(x)


def _gram(jw):
    """JᵀJ laid out (k, k, b) from a Jacobian laid out (k, n, b)."""
    k = jw.shape[0]
    a = np.empty((k, k, jw.shape[2]))
    for j in range(k):
        for m in range(j + 1):
            a[j, m] = a[m, j] = np.einsum("nb,nb->b", jw[j], jw[m])
    return a


def _covariance(a, ssr, n_obs, n_free, free):
    """Scaled (JᵀJ)⁻¹ (batch-last, (k, k, b)) over the free parameters; NaN where
    singular or fixed. ``free`` is (k, b)."""
    k, _, b = a.shape
    held = ~free
    a = np.where(held[:, None, :] | held[None, :, :], 0.0, a)
    diag = np.stack([a[j, j] for j in range(k)])
    ok = np.all((diag > 0) | held, axis=0)
    scale = np.where(free & (diag > 0), np.sqrt(np.where(diag > 0, diag, 1.0)), 1.0)
    c = a / (scale[:, None, :] * scale[None, :, :])
    for j in range(k):
        c[j, j] = np.where(held[j], 1.0, c[j, j])
    low, solved = _cholesky(c)
    ok &= solved
    inverse = np.empty((k, k, b))
    for col in range(k):
        unit = np.zeros((k, b))
        unit[col] = 1.0
        inverse[:, col] = _substitute(low, unit)
    # A near-zero pivot of the unit-diagonal matrix: singular to working precision.
    ok &= np.all(np.stack([inverse[j, j] for j in range(k)]) < 1.0 / _SINGULAR_PIVOT, axis=0)
    # Undo the scaling only where the matrix is regular: a singular problem's diagonal
    # can be subnormal (a flat curve whose midpoint went 30 decades past the data:
    # 1e-320), and dividing its inverse by that overflowed, a RuntimeWarning for a
    # covariance that is NaN anyway.
    inverse = np.where(ok, inverse, np.nan)
    scale = np.where(ok, scale, 1.0)
    variance = ssr / np.maximum(n_obs - n_free, 1)
    cov = inverse / (scale[:, None, :] * scale[None, :, :]) * variance
    return np.where(held[:, None, :] | held[None, :, :], np.nan, cov)


def _sanitise(args, valid):
    """Padded entries take their row's first valid value, so the model stays finite there."""
    first = np.argmax(valid, axis=1)
    out = []
    for a in args:
        fill = np.take_along_axis(a, first[:, None], axis=1)
        fill = np.where(np.isfinite(fill), fill, 1.0)
        out.append(np.where(valid, a, fill))
    return out


def solve(model: Callable, theta0, args, y, *, mask=None, weights=None, lower=None,
          upper=None, free=None, max_iterations=MAX_ITERATIONS, ftol=FTOL, xtol=XTOL,
          gtol=GTOL) -> LMResult:
    """Minimise sum((w·(y − f(θ)))²) for every problem of a batch.

    Parameters
    ----------
    model : callable
        ``model(theta, *args) -> (prediction, jacobian)``, batch-last: ``theta`` of
        shape (k, b), each arg and the prediction of shape (n, b), the Jacobian
        d prediction / d theta of shape (k, n, b). It must accept any subset of
        problems (columns).
    theta0 : array_like, shape (B, k)
        Starting values (clipped into the bounds).
    args : tuple of array_like, each shape (B, n)
        The independent variables (e.g. concentrations), padded.
    y : array_like, shape (B, n)
        Observations, padded.
    mask : array_like of bool, shape (B, n), optional
        True where a point belongs to its problem; default all True.
    weights : array_like, shape (B, n), optional
        Residual multipliers (1/σ); default 1.
    lower, upper : array_like, shape (B, k) or (k,), optional
        Bounds on theta; default unbounded.
    free : array_like of bool, shape (B, k) or (k,), optional
        False for parameters held at their starting value; default all free.
    max_iterations : int
        Trial steps allowed per problem.
    ftol, xtol, gtol : float
        Convergence tolerances (see the module constants).

    Returns
    -------
    LMResult
        Problems with a non-finite point among their valid data, or with no more
        points than free parameters, are marked failed and never touched.
    """
    theta0 = np.array(theta0, dtype=float, ndmin=2)
    n_batch, k = theta0.shape
    y = np.asarray(y, dtype=float)
    y = y[None, :] if y.ndim == 1 else y
    valid = np.ones(y.shape, dtype=bool) if mask is None else \
        np.asarray(mask, dtype=bool).reshape(y.shape)
    args = [np.asarray(a, dtype=float).reshape(y.shape) for a in args]
    w = np.ones(y.shape) if weights is None else \
        np.asarray(weights, dtype=float).reshape(y.shape)
    lower = np.broadcast_to(-np.inf if lower is None else np.asarray(lower, float),
                            (n_batch, k))
    upper = np.broadcast_to(np.inf if upper is None else np.asarray(upper, float),
                            (n_batch, k))
    free = np.broadcast_to(True if free is None else np.asarray(free, bool), (n_batch, k))
    theta = np.clip(theta0, lower, upper)

    finite = np.all(np.isfinite(y) | ~valid, axis=1) & np.all(np.isfinite(w) | ~valid, axis=1)
    for a in args:
        finite &= np.all(np.isfinite(a) | ~valid, axis=1)
    finite &= np.all(np.isfinite(theta), axis=1)
    n_obs = valid.sum(axis=1)
    n_free = free.sum(axis=1)
    status = np.zeros(n_batch, dtype=np.int8)
    status[~finite] = FAILED_DATA
    status[finite & (n_obs <= n_free)] = FAILED_TOO_FEW
    iterations = np.zeros(n_batch, dtype=np.int64)
    ssr_out = np.full(n_batch, np.nan)
    gram_out = np.full((k, k, n_batch), np.nan)
    theta_out = theta.T.copy()

    work = np.flatnonzero(status == _RUNNING)
    if work.size:
        y_w = np.where(valid, y, 0.0)
        w_w = np.where(valid, w, 0.0)
        args_w = _sanitise(args, valid)
        unweighted = bool(np.all(w_w[work] == 1.0))
        phase = min(max_iterations, _BLOCK_ITERATIONS)
        span = max(1, _BLOCK_POINTS // y.shape[1])
        tail = []
        for lo in range(0, work.size, span):
            rows = work[lo:lo + span]
            # Batch-last copies of the block: every vector operation then runs over
            # contiguous memory, and sums over points add whole rows.
            state = _Working(rows, theta_out[:, rows].copy(), [a[rows].T.copy() for a in args_w],
                             y_w[rows].T.copy(), w_w[rows].T.copy(), lower[rows].T.copy(),
                             upper[rows].T.copy(), free[rows].T.copy(), unweighted)
            _start(model, state, status)
            _iterate(model, state, status, iterations, ssr_out, theta_out, gram_out, phase,
                     ftol, xtol, gtol)
            if state.running.any():
                state.keep(state.running)
                tail.append(state)
        if tail:
            state = _Working.merge(tail)
            _iterate(model, state, status, iterations, ssr_out, theta_out, gram_out,
                     max_iterations - phase, ftol, xtol, gtol)
            status[state.idx[state.running]] = FAILED_ITERATIONS
    cov_out = np.full((n_batch, k, k), np.nan)
    done_all = np.flatnonzero(status > 0)
    for lo in range(0, done_all.size, _BLOCK_POINTS // (k * k)):
        done = done_all[lo:lo + _BLOCK_POINTS // (k * k)]
        cov = _covariance(gram_out[:, :, done], ssr_out[done], n_obs[done], n_free[done],
                          free[done].T)
        cov_out[done] = np.moveaxis(cov, 2, 0)
    return LMResult(theta_out.T.copy(), ssr_out, status, iterations, n_obs, n_free, cov_out,
                    free.copy())


@dataclass
class _Working:
    """The running problems' data and state, batch-last (mutable, internal)."""

    idx: np.ndarray
    theta: np.ndarray
    args: list
    y: np.ndarray
    w: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    free: np.ndarray
    unweighted: bool = False
    g: np.ndarray = None
    ssr: np.ndarray = None
    gram: np.ndarray = None
    curv: np.ndarray = None
    lam: np.ndarray = None
    nu: np.ndarray = None
    d: np.ndarray = None
    moved: np.ndarray = None
    running: np.ndarray = None

    _PER_PROBLEM = ("theta", "y", "w", "lower", "upper", "free", "g", "d", "gram", "curv",
                    "ssr", "lam", "nu", "moved", "running")

    @classmethod
    def merge(cls, parts):
        """One working set of the problems of ``parts`` (blocks of one batch)."""
        out = cls(np.concatenate([p.idx for p in parts]), None,
                  [np.concatenate(a, axis=-1) for a in zip(*(p.args for p in parts))],
                  None, None, None, None, None, parts[0].unweighted)
        for name in cls._PER_PROBLEM:
            if getattr(parts[0], name) is not None:
                setattr(out, name, np.concatenate([getattr(p, name) for p in parts], axis=-1))
        return out

    def keep(self, which):
        """Drop the columns (problems) not in ``which``.

        Indexing a later axis can hand back a non-C layout, with which numpy would sum
        over points in another order; every array is made C-contiguous again so that a
        problem's rounding never depends on its neighbours.
        """
        self.idx = self.idx[which]
        for name in ("theta", "y", "w", "lower", "upper", "free", "g", "d"):
            setattr(self, name, np.ascontiguousarray(getattr(self, name)[:, which]))
        self.args = [np.ascontiguousarray(a[:, which]) for a in self.args]
        self.gram = np.ascontiguousarray(self.gram[:, :, which])
        if self.curv is not None:
            self.curv = np.ascontiguousarray(self.curv[:, :, which])
        for name in ("ssr", "lam", "nu", "moved", "running"):
            setattr(self, name, getattr(self, name)[which])


def _evaluate(model, st, theta):
    """SSR, Jᵀr, JᵀJ and Σ r·∇²f (None without :meth:`curvature`) at ``theta``; the
    residuals and Jacobian are not kept."""
    if theta.shape[1] == 1:
        # numpy sums a lone column pairwise but several columns point by point in order;
        # a duplicate column keeps one problem's rounding the same in any batch.
        twin = _Working(st.idx, None, [np.repeat(a, 2, axis=1) for a in st.args],
                        np.repeat(st.y, 2, axis=1), np.repeat(st.w, 2, axis=1), None, None,
                        None, st.unweighted)
        ssr, g, gram, curv = _evaluate(model, twin, np.repeat(theta, 2, axis=1))
        return ssr[:1], g[:, :1], gram[:, :, :1], None if curv is None else curv[:, :, :1]
    pred, jac = model(theta, *st.args)
    r = st.y - pred
    if st.unweighted:
        jw = jac
    else:
        r *= st.w
        jw = jac * st.w
    ssr, g, gram = np.einsum("nb,nb->b", r, r), np.einsum("knb,nb->kb", jw, r), _gram(jw)
    curv = None
    if hasattr(model, "curvature"):
        curv = model.curvature(theta, *st.args, jacobian=jac,
                               residual=r if st.unweighted else r * st.w)
    return ssr, g, gram, curv


def _damped_step(a, g, lam, d, held):
    """Solve (A + λ·D) δ = g; parameters ``held`` (k, b) or None keep δ = 0.
    Returns (δ, solved): solved is False where the damped matrix is not positive definite."""
    k = a.shape[0]
    m = a.copy()
    for j in range(k):
        m[j, j] = a[j, j] + lam * d[j]
    if held is not None:
        m = np.where(held[:, None, :] | held[None, :, :], 0.0, m)
        for j in range(k):
            m[j, j] = np.where(held[j], 1.0, m[j, j])
    low, solved = _cholesky(m)
    with np.errstate(all="ignore"):
        step = _substitute(low, g)
    return step, solved


def _diag(a):
    """The diagonal of a (k, k, b) stack as a (k, b) view (no copy when contiguous)."""
    k = a.shape[0]
    return a.reshape(k * k, -1)[::k + 1]


def _store(st, which, theta_out, ssr_out, gram_out):
    rows = st.idx[which]
    theta_out[:, rows] = st.theta[:, which]
    ssr_out[rows] = st.ssr[which]
    gram_out[:, :, rows] = st.gram[:, :, which]


def _start(model, st: _Working, status):
    """Evaluate the working problems at their starts; those that cannot run, or are
    already exact, are marked."""
    with np.errstate(all="ignore"):
        st.ssr, st.g, st.gram, st.curv = _evaluate(model, st, st.theta)
    bad = ~np.isfinite(st.ssr) | ~np.all(np.isfinite(_diag(st.gram)), axis=0)
    status[st.idx[bad]] = FAILED_START
    st.running = ~bad
    st.lam = np.full(st.idx.size, _LAMBDA_START)
    st.nu = np.full(st.idx.size, 2.0)
    st.moved = np.zeros(st.idx.size, dtype=bool)
    st.d = _diag(st.gram).copy()
    exact = st.running & (st.ssr == 0)
    status[st.idx[exact]] = CONVERGED_EXACT
    st.running &= ~exact


def _iterate(model, st: _Working, status, iterations, ssr_out, theta_out, gram_out,
             max_iterations, ftol, xtol, gtol):
    """Run up to ``max_iterations`` LM steps on the working problems, until each
    converges or fails; every problem's state is stored on return."""
    k = st.theta.shape[0]
    bounded = bool(np.any(np.isfinite(st.lower)) or np.any(np.isfinite(st.upper)))

    for _ in range(max_iterations):
        if not st.running.any():
            break
        if st.running.mean() < _COMPACT_FRACTION:
            _store(st, ~st.running, theta_out, ssr_out, gram_out)
            st.keep(st.running)
        run = st.running
        iterations[st.idx[run]] += 1
        t, a, g = st.theta, st.gram, st.g
        # Held this step: fixed parameters, and those at a bound pushed outward.
        held = ~st.free
        if bounded:
            held = held | ((t <= st.lower) & (g < 0)) | ((t >= st.upper) & (g > 0))
        any_held = bool(held.any())
        st.d = np.maximum(st.d, _diag(a))
        d = np.where(st.d > 0, st.d, 1.0)
        if any_held:
            g = np.where(held, 0.0, g)
        if st.curv is None:
            step, solved = _damped_step(a, g, st.lam, d, held if any_held else None)
        else:
            # The full Hessian of the SSR/2, JᵀJ − Σ r·∇²f, where the damped matrix is
            # positive definite: Newton's quadratic convergence where Gauss–Newton's is
            # only linear (residuals not small). Elsewhere, and until a problem's first
            # step is accepted, the Gauss–Newton step: at the automatic starts the full
            # Hessian of the 4PL often points the first step the wrong way (a Hill slope
            # of the wrong sign, rejected three or four times); 100,000 benchmark curves
            # took 5.9 iterations on average instead of 6.7 (measured). One factorisation
            # for both kinds; only the Newton columns whose damped Hessian is not positive
            # definite are solved again (the arithmetic is element-wise, so a column's
            # step does not depend on which others are solved with it).
            hess = np.where(st.moved, a - st.curv, a)
            step, solved = _damped_step(hess, g, st.lam, d, held if any_held else None)
            newton = solved & st.moved
            redo = np.flatnonzero(st.moved & ~solved)
            if redo.size:
                step[:, redo], solved[redo] = _damped_step(
                    a[:, :, redo], g[:, redo], st.lam[redo], d[:, redo],
                    held[:, redo] if any_held else None)
                hess[:, :, redo] = a[:, :, redo]
            a = hess
        step = np.where(solved, step, 0.0)
        trial = np.clip(t + step, st.lower, st.upper) if bounded else t + step
        step = trial - t
        # Gain the quadratic model predicts; held rows have g = 0 and step = 0.
        # A·δ a column of A at a time: (k, b) rows, added in the same order as a dot product.
        a_step = a[:, 0] * step[0]
        for m_ in range(1, k):
            a_step += a[:, m_] * step[m_]
        predicted = np.sum(step * (2 * g - a_step), axis=0)
        a = st.gram
        with np.errstate(all="ignore"):
            ssr_t, g_t, gram_t, curv_t = _evaluate(model, st, trial)
            ok_t = np.isfinite(ssr_t) & np.all(np.isfinite(_diag(gram_t)), axis=0) & solved
        accept = run & ok_t & (ssr_t < st.ssr)
        actual = st.ssr - ssr_t
        with np.errstate(all="ignore"):
            rho = np.where(predicted > 0, actual / predicted, 0.0)
            norms = np.sqrt(_diag(a) * st.ssr)
            cosine = np.where((held | (norms == 0)) if any_held else (norms == 0), 0.0,
                              np.abs(g) / norms)
        largest_cosine = np.max(cosine, axis=0)
        flat = largest_cosine <= gtol
        near_flat = largest_cosine <= _STALL_GTOL
        # A tiny step means convergence only when it was taken, or when the gradient is
        # already negligible: a heavily damped rejected step is tiny for another reason.
        small_step = ok_t & np.all(np.abs(step) <= xtol * (1.0 + np.abs(t)), axis=0) \
            & (accept | near_flat)
        small_gain = accept & (actual <= ftol * st.ssr) & (predicted <= ftol * st.ssr)
        if st.curv is not None:
            small_gain |= accept & newton & (np.abs(rho - 1.0) <= _NEWTON_RHO) \
                & (predicted <= ftol ** _NEWTON_FTOL_POWER * st.ssr)
        # A lightly damped step whose predicted gain is below ftol and which still does
        # not lower the SSR: the problem sits at its minimum to the SSR's rounding. More
        # damping would only shrink the step until xtol holds at this same point (six
        # to eight rejected steps of the 4PL benchmark's slower curves, measured), so
        # it stops here.
        at_rounding = run & ok_t & ~accept & near_flat & (st.lam <= _LAMBDA_START) \
            & (predicted >= 0) & (predicted <= ftol * st.ssr)

        # Accepted steps move the state.
        # In place: the state's arrays are the working set's own (fresh from _evaluate,
        # keep or merge), never views of the caller's.
        np.copyto(st.theta, trial, where=accept)
        np.copyto(st.g, g_t, where=accept)
        np.copyto(st.gram, gram_t, where=accept)
        if curv_t is not None:
            np.copyto(st.curv, curv_t, where=accept)
        np.copyto(st.ssr, ssr_t, where=accept)
        with np.errstate(all="ignore"):
            shrink = np.maximum(1.0 / 3.0, 1.0 - (2.0 * rho - 1.0) ** 3)
        rejected = run & ~accept
        st.moved |= accept
        st.lam = np.where(accept, st.lam * shrink, np.where(rejected, st.lam * st.nu, st.lam))
        st.nu = np.where(accept, 2.0, np.where(rejected, st.nu * 2.0, st.nu))

        code = np.zeros(st.idx.size, dtype=np.int8)
        code[flat] = CONVERGED_GTOL
        code[small_step] = CONVERGED_XTOL
        code[small_gain] = CONVERGED_FTOL
        code[at_rounding] = CONVERGED_PRECISION
        code[accept & (ssr_t == 0)] = CONVERGED_EXACT
        stalled = st.lam > _LAMBDA_MAX
        if stalled.any():
            stalled &= code == 0
            code[stalled & near_flat] = CONVERGED_PRECISION
            code[stalled & ~near_flat] = FAILED_STALLED
        finished = run & (code != 0)
        status[st.idx[finished]] = code[finished]
        st.running = run & ~finished

    _store(st, np.ones(st.idx.size, dtype=bool), theta_out, ssr_out, gram_out)
