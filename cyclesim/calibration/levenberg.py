"""Bounded Levenberg-Marquardt iteration (Marquardt 1963) run in lockstep over independent problems, every trial case of an iteration in one simulated batch."""

from __future__ import annotations

from typing import Sequence

import numpy as np

from ..config import case_with
from ..errors import ConfigError, CyclesimError
from .problem import _Problem


def _fd_steps(pb: _Problem, x: np.ndarray, rel: float) -> np.ndarray:
    h = rel * np.maximum(np.abs(x), pb.typ)
    # backward where a forward step would leave the bounds
    return np.where(x + h > pb.hi, -h, h)


def _cases_for(pb: _Problem, x: np.ndarray, h: np.ndarray):
    """Cases for the point x and its finite-difference neighbours: list of (point, column, case)."""
    out = []
    for ip, pt in enumerate(pb.points):
        base = {k: float(x[j]) for k, j in zip(pt.keys, pt.idx)}
        out.append((ip, -1, base))
        for k, j in zip(pt.keys, pt.idx):
            ch = dict(base)
            ch[k] = float(x[j] + h[j])
            out.append((ip, int(j), ch))
    return out


def _evaluate(problems: Sequence[_Problem], xs: Sequence[np.ndarray], rel: float, counter: list):
    """Residuals and Jacobians of every problem at its x, from one simulate batch."""
    from ..api import simulate

    plans, cases = [], []
    for pb, x in zip(problems, xs):
        h = _fd_steps(pb, x, rel)
        plan = _cases_for(pb, x, h)
        plans.append((h, plan))
        for ip, _, ch in plan:
            try:
                cases.append(case_with(pb.points[ip].case, ch))
            except ConfigError:
                cases.append(None)
    run = [c for c in cases if c is not None]
    counter[0] += len(run)
    results = iter(simulate(run)) if run else iter(())
    res_all = [next(results) if c is not None else None for c in cases]
    out = []
    pos = 0
    for pb, (h, plan) in zip(problems, plans):
        base_r: dict[int, np.ndarray] = {}
        cols: dict[tuple, np.ndarray] = {}
        ok = True
        bases = {}
        for ip, j, _ in plan:
            res = res_all[pos]
            pos += 1
            r = pb.points[ip].residual(res)
            if r is None:
                ok = False
            if j < 0:
                base_r[ip] = r
                bases[ip] = res
            else:
                cols[(ip, j)] = r
        if not ok:
            out.append(None)
            continue
        r_full = np.concatenate([base_r[ip] for ip in range(len(pb.points))])
        J = np.zeros((r_full.size, len(pb.x)))
        o = 0
        for ip, pt in enumerate(pb.points):
            n = base_r[ip].size
            for j in pt.idx:
                J[o:o + n, j] = (cols[(ip, int(j))] - base_r[ip]) / h[j]
            o += n
        out.append((r_full, J, bases))
    return out


def _lm_step(pb: _Problem) -> np.ndarray:
    g = pb.J.T @ pb.r
    A = pb.J.T @ pb.J
    d = np.diag(A).copy()
    d = np.where(d > 0, d, 1e-12 * max(d.max(), 1e-300))
    p = len(pb.x)
    free = np.ones(p, bool)
    eps = 1e-12 * np.maximum(pb.hi - pb.lo, 1.0)
    free &= ~((pb.x <= pb.lo + eps) & (g > 0))     # at lower bound and pushed down
    free &= ~((pb.x >= pb.hi - eps) & (g < 0))     # at upper bound and pushed up
    step = np.zeros(p)
    if free.any():
        Af = A[np.ix_(free, free)] + pb.lam * np.diag(d[free])
        try:
            step[free] = np.linalg.solve(Af, -g[free])
        except np.linalg.LinAlgError:
            step[free] = -np.linalg.lstsq(Af, g[free], rcond=None)[0]
    return np.clip(pb.x + step, pb.lo, pb.hi)


def _solve(problems: list[_Problem], *, max_iter: int = 40, ftol: float = 1e-9, xtol: float = 1e-7,
           fd_rel: float = 1e-4, progress=None) -> int:
    """Run the lockstep LM; returns the number of simulated cases."""
    counter = [0]
    first = _evaluate(problems, [pb.x for pb in problems], fd_rel, counter)
    for pb, got in zip(problems, first):
        if got is None:
            raise CyclesimError(
                "fit: the simulation at the start values failed or gave no finite pressure on the"
                " measured grid; check the start values and the fit window")
        pb.r, pb.J, pb.bases = got
        pb.cost = 0.5 * float(pb.r @ pb.r)
        pb.history.append(pb.cost)
    for it in range(max_iter):
        act = [pb for pb in problems if not pb.done]
        if not act:
            break
        trials = [_lm_step(pb) for pb in act]
        got = _evaluate(act, trials, fd_rel, counter)
        for pb, xt, g in zip(act, trials, got):
            pb.iterations += 1
            cost_t = np.inf if g is None else 0.5 * float(g[0] @ g[0])
            if cost_t < pb.cost:
                dx = np.abs(xt - pb.x)
                dcost = (pb.cost - cost_t) / max(pb.cost, 1e-300)
                pb.x, (pb.r, pb.J, pb.bases), pb.cost = xt, g, cost_t
                pb.lam = max(pb.lam / 3.0, 1e-9)
                pb.history.append(cost_t)
                if dcost < ftol or np.all(dx <= xtol * (np.abs(pb.x) + pb.typ)):
                    pb.done, pb.converged = True, True
                    pb.message = "converged (relative change of cost or step below tolerance)"
            else:
                pb.lam *= 4.0
                if pb.lam > 1e8:
                    pb.done, pb.converged = True, True
                    pb.message = "converged (no step lowers the cost further)"
        if progress:
            progress(it + 1, sum(pb.done for pb in problems), len(problems))
    for pb in problems:
        if not pb.done:
            pb.message = f"stopped after {max_iter} iterations without meeting the tolerance"
    return counter[0]
