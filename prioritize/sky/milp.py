"""The night plan as a time-slot assignment solved exactly: a mixed-integer linear programme.

Formulation
-----------
One binary variable x_is per target i and allowed slot start s (a start on the
candidate grid at which the target stays within its limits for the whole slot):

    maximise    sum_is (v_is + b_is) x_is
    subject to  sum_s x_is <= 1                                for every target i
                sum_{(i,s): s <= tau < s + d_is} x_is <= 1    for every candidate start tau
                x_is in {0, 1}

v_is is what the slot yields (expected detections), b_is a small bonus that breaks
ties towards low air mass, d_is the slot length in grid steps.  Two slots overlap
exactly when one of them starts inside the other, so one no-overlap row per distinct
candidate start suffices (interval graphs: every maximal clique contains some
interval's start).  The candidate starts are every ``stride``-th grid step plus any
``extra_starts`` (e.g. the greedy plan's own starts, so that the greedy plan is a
feasible point and the optimum cannot be worse than it).

scipy.optimize.milp (HiGHS branch and cut) solves it within a time limit and reports
the best plan found, the dual bound and the relative optimality gap.

References
----------
Huangfu, Q. & Hall, J. A. J. 2018, Math. Prog. Comp. 10, 119 (HiGHS); Virtanen et al.
2020, Nature Methods 17, 261 (SciPy).  Interval-graph cliques: Gilmore, P. C. &
Hoffman, A. J. 1964, Canad. J. Math. 16, 539 (from memory).
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class MilpResult:
    """Outcome of :func:`solve_slot_milp`.

    Attributes
    ----------
    start : numpy.ndarray of int
        Start step of each target, -1 when left out.
    status : str
        ``"optimal"``, ``"time_limit"`` (best plan found when the limit was hit) or
        ``"no_solution"``.
    objective : float
        Sum of v_is over the chosen slots (the bonus excluded).
    bound : float
        HiGHS's dual bound on the objective with the bonus (NaN when unknown).
    gap : float
        Relative optimality gap reported by HiGHS (0 when optimal; NaN when unknown).
    variables, rows : int
        Size of the programme.
    stride : int
        Candidate starts every ``stride`` grid steps.
    seconds : float
        Wall time of the solve.
    """

    start: np.ndarray
    status: str
    objective: float
    bound: float
    gap: float
    variables: int
    rows: int
    stride: int
    seconds: float


def solve_slot_milp(start_ok, duration_steps, value, bonus=None, *, stride: int = 1,
                    extra_starts=None, time_limit_s: float = 60.0,
                    mip_rel_gap: float = 1e-4) -> MilpResult:
    """Choose at most one slot per target, without overlaps, maximising the summed value.

    Parameters
    ----------
    start_ok : array_like of bool
        ``(n, m)``: a slot of target i may start at step s (within all limits for its
        whole length; :func:`prioritize.sky.schedule.feasible_starts`).
    duration_steps : array_like of int
        ``(n, m)`` slot length (steps, >= 1) when starting at s.
    value : array_like of float
        ``(n, m)`` yield of that slot (>= 0).
    bonus : array_like of float, optional
        ``(n, m)`` tie-breaking reward added to the value in the solve only.
    stride : int
        Candidate starts on every ``stride``-th step (>= 1).
    extra_starts : array_like of int, optional
        ``(n,)`` one more allowed start per target (-1 for none).
    time_limit_s : float
        Wall-time limit handed to HiGHS.
    mip_rel_gap : float
        Relative gap at which HiGHS stops as optimal.

    Returns
    -------
    MilpResult
    """
    from scipy.optimize import Bounds, LinearConstraint, milp
    from scipy.sparse import csr_array

    begun = time.perf_counter()
    start_ok = np.asarray(start_ok, dtype=bool)
    n, m = start_ok.shape
    d = np.asarray(duration_steps, dtype=np.int64)
    v = np.asarray(value, dtype=float)
    b = np.zeros((n, m)) if bonus is None else np.asarray(bonus, dtype=float)
    allowed = start_ok.copy()
    allowed[:, np.arange(m) % max(1, int(stride)) != 0] = False
    if extra_starts is not None:
        extra = np.asarray(extra_starts, dtype=np.int64)
        rows_with = np.flatnonzero(extra >= 0)
        allowed[rows_with, extra[rows_with]] |= start_ok[rows_with, extra[rows_with]]
    target, step = np.nonzero(allowed)
    empty = np.full(n, -1, dtype=np.int64)
    if target.size == 0:
        return MilpResult(empty, "optimal", 0.0, 0.0, 0.0, 0, 0, int(stride), time.perf_counter() - begun)
    length = d[target, step]
    checkpoints = np.unique(step)
    first = np.searchsorted(checkpoints, step)                       # checkpoints tau in [s, s + d)
    last = np.searchsorted(checkpoints, step + length)
    count = last - first
    var_of_entry = np.repeat(np.arange(target.size), count)
    offsets = np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count)
    row_of_entry = n + np.repeat(first, count) + offsets
    rows = np.concatenate([target, row_of_entry])
    cols = np.concatenate([np.arange(target.size), var_of_entry])
    matrix = csr_array((np.ones(rows.size), (rows, cols)), shape=(n + checkpoints.size, target.size))
    worth = v[target, step]
    cost = -(worth + b[target, step])
    result = milp(cost, integrality=np.ones(target.size), bounds=Bounds(0, 1),
                  constraints=LinearConstraint(matrix, -np.inf, 1.0),
                  options={"time_limit": float(time_limit_s), "mip_rel_gap": float(mip_rel_gap),
                           "disp": False})
    seconds = time.perf_counter() - begun
    if result.x is None:
        return MilpResult(empty, "no_solution", np.nan, np.nan, np.nan, target.size, matrix.shape[0],
                          int(stride), seconds)
    chosen = result.x > 0.5
    start = empty.copy()
    start[target[chosen]] = step[chosen]
    bound = getattr(result, "mip_dual_bound", np.nan)
    gap = getattr(result, "mip_gap", np.nan)
    status = "optimal" if result.status == 0 else "time_limit"
    return MilpResult(start, status, float(worth[chosen].sum()),
                      float(-bound) if bound is not None else np.nan,
                      float(gap) if gap is not None else np.nan, target.size, matrix.shape[0],
                      int(stride), seconds)
