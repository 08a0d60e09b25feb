"""Ridge, lasso, elastic-net and group-lasso fits of cumulative-link models.

The model is that of :mod:`riskvet.modelling.fitter`,
``P(Y <= j | x) = F(theta_j - x beta - offset)``, and the estimate minimises

    -loglik(theta, beta) / sum(w) + alpha * (l1_ratio * P1(beta) + (1 - l1_ratio) / 2 * ||beta||^2)

over the coefficients of the penalised columns (thresholds and the
``unpenalized`` columns carry no penalty).  ``P1`` is the L1 norm, or with
groups of columns the group-lasso norm ``sum_g sqrt(p_g) ||beta_g||``, so a
multi-column term (a spline basis, the indicators of a category) enters or
leaves the model whole.

:func:`fit_penalized` fits one penalty, :func:`penalty_path` a decreasing
sequence of penalties with warm starts, and :func:`tune_penalty` chooses the
penalty by k-fold cross-validated log-likelihood on standardised columns and
reports the final fit on the original scale.
"""

from __future__ import annotations

import dataclasses
import math
import numbers
import warnings
from typing import Any, Mapping, NamedTuple

import numpy as np
import pandas as pd

from .._jsonable import to_jsonable
from ..errors import ConvergenceWarning, CrossingWarning, DesignError, FitError, RiskvetWarning, problem
from .fitter import (
    DEFAULT_MAX_ITER,
    CumulativeFit,
    LRTest,
    _Design,
    _admissible,
    _as_matrix,
    _as_outcome,
    _as_vector,
    _check_levels,
    _chol_scaled,
    _chol_solve,
    _default_start,
    _evaluate,
    _fit_arrays,
    _grad_hess,
    _gradient,
    _make_design,
    _null_loglik,
    _param_names,
    _raise_if_collinear,
    _start_vector,
    _to_centred,
    _to_natural,
    one_blas_thread,
)
from .folds import cluster_folds
from .links import LINKS

__all__ = ["fit_penalized", "penalty_path", "tune_penalty", "PenaltyPath", "PenaltyChoice"]

#: Convergence tolerance on the proximal Newton decrement, on the scale of the
#: summed log-likelihood (the fitter's Newton decrement uses the same scale).
DEFAULT_TOL = 1e-8
#: Smallest penalty of a default path as a share of the largest (Friedman,
#: Hastie & Tibshirani 2010, section 2.5), and for ridge (see :func:`penalty_path`).
DEFAULT_ALPHA_MIN_RATIO = 1e-3
RIDGE_ALPHA_MIN_RATIO = 1e-4
#: A pure ridge penalty never sets a coefficient to zero, so its path starts
#: where a penalty with this l1 share would (see :func:`penalty_path`).
RIDGE_L1_FLOOR = 0.01
# Sufficient-decrease constant of the backtracking line search (common practice).
_ARMIJO = 1e-4
_MAX_HALVINGS = 50
_MAX_SWEEPS = 10_000
# Relative floor of the eigenvalues of a group's block of the quadratic model:
# it keeps a block solvable and leaves the fixed point, hence the estimate, unchanged.
_EIGEN_FLOOR = 1e-12
_ALPHA_MAX_MARGIN = 1e-8
# Held-out log-likelihoods this close (relative) count as tied.
_TIE = 1e-10


# --------------------------------------------------------------------------
# Input
# --------------------------------------------------------------------------


class _Inputs(NamedTuple):
    """Validated arrays of one call (rows with zero weight dropped)."""

    X: np.ndarray
    y: np.ndarray
    K: int
    w: np.ndarray
    unit: bool
    off: np.ndarray | None
    levels: tuple
    columns: tuple
    link: str
    proportional: bool
    groups: dict | None  # name -> list of column names, as given
    unpenalized: tuple


class _Penalty(NamedTuple):
    """Where the penalty falls, as indices into the parameter vector."""

    free: np.ndarray  # unpenalised parameters: thresholds, then those of unpenalised columns
    groups: tuple  # one index array per penalised group
    weights: np.ndarray  # sqrt(number of parameters) of each group
    pen: np.ndarray  # every penalised parameter
    names: tuple  # group names (a column's name for a column on its own)
    columns: tuple  # column indices of each group
    single: np.ndarray  # the parameters that are groups of their own (weight 1)
    multi: tuple  # (indices, weight) of the larger groups


def _check_common(link, proportional, max_iter, tol) -> None:
    if link not in LINKS:
        raise FitError(problem("link", allowed=f"one of {list(LINKS)}", received=link))
    if not isinstance(proportional, (bool, np.bool_)):
        raise FitError(problem("proportional", allowed="True or False", received=proportional))
    if not isinstance(max_iter, (int, np.integer)) or isinstance(max_iter, bool) or max_iter < 1:
        raise FitError(problem("max_iter", allowed="a positive integer", received=max_iter))
    if not isinstance(tol, (int, float)) or isinstance(tol, bool) or not 0.0 < float(tol) < 1.0:
        raise FitError(problem("tol", allowed="a number in (0, 1)", received=tol))


def _check_l1_ratio(l1_ratio) -> float:
    ok = isinstance(l1_ratio, numbers.Real) and not isinstance(l1_ratio, bool) and 0.0 <= float(l1_ratio) <= 1.0
    if not ok:
        raise FitError(problem("l1_ratio", allowed="a number in [0, 1]", received=l1_ratio))
    return float(l1_ratio)


def _check_alpha(alpha, where: str = "alpha") -> float:
    ok = isinstance(alpha, numbers.Real) and not isinstance(alpha, bool) and math.isfinite(float(alpha)) and float(alpha) >= 0.0
    if not ok:
        raise FitError(problem(where, allowed="a finite number >= 0", received=alpha))
    return float(alpha)


def _prepare(X, y, *, link, proportional, weights, offset, groups, unpenalized) -> _Inputs:
    """Validate the data as :func:`~riskvet.modelling.fitter.fit_cumulative` does, plus the penalty's columns."""
    codes, K, levels = _as_outcome(y, None)
    n = codes.shape[0]
    Xa, columns = _as_matrix(X, n)
    off = None if offset is None else _as_vector(offset, "offset", n)
    unit = weights is None
    w = np.ones(n)
    if not unit:
        w = _as_vector(weights, "weights", n)
        if np.any(w < 0):
            raise FitError(problem("weights", allowed="non-negative weights", received=f"{int(np.sum(w < 0))} negative"))
    _check_levels(codes, K, w, levels)
    if not unit and np.any(w <= 0):
        keep = w > 0
        Xa, codes, w = Xa[keep], codes[keep], w[keep]
        off = None if off is None else off[keep]
    groups_out, unpen = _check_columns(columns, groups, unpenalized)
    if Xa.shape[1]:
        _refuse_constant(Xa, w, columns)
    return _Inputs(Xa, codes, K, w, unit, off, levels, columns, link, bool(proportional), groups_out, unpen)


def _check_columns(columns: tuple, groups, unpenalized) -> tuple[dict | None, tuple]:
    if isinstance(unpenalized, str) or not _is_iterable(unpenalized):
        raise FitError(problem("unpenalized", allowed="a list of column names", received=unpenalized))
    unpen = tuple(str(c) for c in unpenalized)
    unknown = [c for c in unpen if c not in columns]
    if unknown:
        raise FitError(problem("unpenalized", allowed=f"names among the columns {list(columns)}", received=unknown))
    if groups is None:
        return None, unpen
    if not isinstance(groups, Mapping):
        raise FitError(problem("groups", allowed="a mapping of group name to a list of column names", received=type(groups).__name__))
    out: dict = {}
    seen: dict = {}
    for name, cols in groups.items():
        if isinstance(cols, str) or not _is_iterable(cols) or not list(cols):
            raise FitError(problem(f"groups[{name!r}]", allowed="a non-empty list of column names", received=cols))
        cols = [str(c) for c in cols]
        bad = [c for c in cols if c not in columns]
        if bad:
            raise FitError(problem(f"groups[{name!r}]", allowed=f"names among the columns {list(columns)}", received=bad))
        twice = [c for c in cols if c in seen]
        if twice:
            raise FitError(problem(f"groups[{name!r}]", allowed="columns in one group only", received=f"{twice} also in {seen[twice[0]]!r}"))
        seen.update({c: name for c in cols})
        out[str(name)] = cols
    mixed = {g: cols for g, cols in out.items() if any(c in unpen for c in cols) and not all(c in unpen for c in cols)}
    if mixed:
        raise FitError(problem("unpenalized", allowed="whole groups (a group is penalised or not)", received=f"part of group(s) {sorted(mixed)}"))
    return out, unpen


def _is_iterable(value) -> bool:
    try:
        iter(value)
    except TypeError:
        return False
    return True


def _refuse_constant(X: np.ndarray, w: np.ndarray, columns) -> None:
    W = float(w.sum())
    mu = (w @ X) / W
    sd = np.sqrt((w @ (X - mu) ** 2) / W)
    const = [columns[j] for j in range(X.shape[1]) if sd[j] <= 1e-10 * max(1.0, abs(mu[j]))]
    if const:
        raise FitError(problem("X", allowed="columns that vary (a constant column duplicates the thresholds)", received=f"constant column(s) {const}"))


def _penalty_spec(inp: _Inputs) -> _Penalty:
    """Parameter indices of the unpenalised block and of each penalised group."""
    m = inp.K - 1
    per = 1 if inp.proportional else m
    col_index = {c: j for j, c in enumerate(inp.columns)}

    def params_of(cols: list[int]) -> np.ndarray:
        return np.concatenate([m + j * per + np.arange(per) for j in cols]).astype(np.int64)

    listed: dict[int, str] = {}
    named: list[tuple[str, list[int]]] = []
    for name, cols in (inp.groups or {}).items():
        idx = [col_index[c] for c in cols]
        listed.update({j: name for j in idx})
        named.append((name, idx))
    blocks: list[tuple[str, list[int]]] = []
    done: set = set()
    for j, c in enumerate(inp.columns):
        if j not in listed:
            blocks.append((c, [j]))
        elif listed[j] not in done:
            done.add(listed[j])
            blocks.append(next(b for b in named if b[0] == listed[j]))
    unpen = set(inp.unpenalized)
    free_cols = [j for j, c in enumerate(inp.columns) if c in unpen]
    pen_blocks = [(name, cols) for name, cols in blocks if inp.columns[cols[0]] not in unpen]
    free = np.r_[np.arange(m), params_of(free_cols) if free_cols else np.zeros(0, np.int64)].astype(np.int64)
    gidx = tuple(params_of(cols) for _, cols in pen_blocks)
    pen = np.concatenate(gidx) if gidx else np.zeros(0, np.int64)
    weights = np.array([math.sqrt(g.size) for g in gidx])
    single = np.array([int(g[0]) for g in gidx if g.size == 1], dtype=np.int64)
    multi = tuple((g, float(wt)) for g, wt in zip(gidx, weights) if g.size > 1)
    names = tuple(n for n, _ in pen_blocks)
    return _Penalty(free, gidx, weights, pen, names, tuple(tuple(c) for _, c in pen_blocks), single, multi)


# --------------------------------------------------------------------------
# The solver
# --------------------------------------------------------------------------


def _l1_part(phi: np.ndarray, spec: _Penalty) -> float:
    single = float(np.abs(phi[spec.single]).sum())
    return single + float(sum(wt * math.sqrt(float(phi[g] @ phi[g])) for g, wt in spec.multi))


def _objective(d: _Design, phi: np.ndarray, spec: _Penalty, alpha: float, l1: float):
    """Penalised objective, log-likelihood and per-row pieces at ``phi`` (NaN objective if not admissible)."""
    if not _admissible(d, phi):
        return math.nan, math.nan, None
    ll, pc = _evaluate(d, phi)
    if not np.isfinite(ll):
        return math.nan, ll, pc
    b = phi[spec.pen]
    F = -ll / float(d.w.sum()) + alpha * (l1 * _l1_part(phi, spec) + 0.5 * (1.0 - l1) * float(b @ b))
    return F, ll, pc


def _group_minimiser(r: np.ndarray, e: np.ndarray, Q: np.ndarray, lam: float) -> np.ndarray:
    """Minimiser of ``r'u + u'Hu/2 + lam ||u||`` for a group of several parameters, ``H = Q diag(e) Q'``.

    Notes
    -----
    The minimiser is 0 when ``||r|| <= lam``; otherwise
    ``u = -(H + mu I)^{-1} r`` with ``mu = lam / ||u||``, the root of
    ``f(mu) = 1 / s(mu) - mu / lam``, ``s(mu) = ||(H + mu I)^{-1} r||``.
    ``1 / s`` is concave and rises more slowly than ``mu / lam`` (Moré &
    Sorensen 1983), so ``f`` is concave and decreasing, and Newton's method
    started at ``mu = lam e_max / (||r|| - lam)``, where ``f <= 0``, falls
    monotonically to the root (exactly linear, one step, when ``H`` is a
    multiple of the identity).
    """
    nr = float(np.linalg.norm(r))
    if nr <= lam:
        return np.zeros_like(r)
    rt2 = (Q.T @ r) ** 2
    mu = lam * float(e.max()) / (nr - lam)
    for _ in range(100):
        c = 1.0 / (e + mu)
        s2 = float(rt2 @ (c * c))
        s = math.sqrt(s2)
        f = 1.0 / s - mu / lam
        slope = float(rt2 @ (c * c * c)) / (s2 * s) - 1.0 / lam
        step = f / slope
        mu -= step
        if abs(step) <= 1e-15 * mu:
            break
    return -Q @ ((Q.T @ r) / (e + mu))


class _Blocks(NamedTuple):
    """The quadratic model's blocks for coordinate descent."""

    single: list  # (parameter index, floored h, lam w) for one-parameter groups
    multi: list  # (indices, floored eigenvalues, eigenvectors, floored block matrix, lam w) for larger groups


def _group_blocks(Hs: np.ndarray, spec: _Penalty, lam: float) -> _Blocks:
    scale = max(float(np.max(np.diag(Hs))), 1e-300)
    floor = _EIGEN_FLOOR * scale
    single, multi = [], []
    for g, wt in zip(spec.groups, spec.weights):
        if g.size == 1:
            j = int(g[0])
            single.append((j, max(float(Hs[j, j]), floor), lam * float(wt)))
        else:
            e, Q = np.linalg.eigh(Hs[np.ix_(g, g)])
            e = np.maximum(e, floor)
            multi.append((g, e, Q, (Q * e) @ Q.T, lam * float(wt)))
    return _Blocks(single, multi)


def _sweep(z: np.ndarray, v: np.ndarray, Hs: np.ndarray, free, blocks: _Blocks, active_only: bool) -> float:
    """One pass of block coordinate descent; returns the largest move (squared, in the model's metric).

    With ``active_only`` the groups at zero are skipped.
    """
    biggest = 0.0
    if free is not None:
        idx, Hff, fac = free
        new = -_chol_solve(fac, v[idx] - Hff @ z[idx])
        delta = new - z[idx]
        v += Hs[:, idx] @ delta
        z[idx] = new
        biggest = float(delta @ Hff @ delta)
    for j, h, lam in blocks.single:
        zj = z[j]
        if active_only and zj == 0.0:
            continue
        r = v[j] - h * zj
        new = 0.0 if abs(r) <= lam else (-(r - lam) if r > 0.0 else -(r + lam)) / h
        delta = new - zj
        if delta != 0.0:
            v += Hs[:, j] * delta
            z[j] = new
            biggest = max(biggest, h * delta * delta)
    for g, e, Q, M, lam in blocks.multi:
        if active_only and not np.any(z[g]):
            continue
        new = _group_minimiser(v[g] - M @ z[g], e, Q, lam)
        delta = new - z[g]
        if np.any(delta):
            v += Hs[:, g] @ delta
            z[g] = new
            biggest = max(biggest, float(delta @ M @ delta))
    return biggest


def _prox_newton_point(gs: np.ndarray, Hs: np.ndarray, phi: np.ndarray, spec: _Penalty, lam: float, inner_tol: float, z0=None):
    """Minimiser ``z`` of the quadratic model plus the group penalty, by block coordinate descent.

    The model is ``gs'(z - phi) + (z - phi)'Hs(z - phi)/2 + lam sum_g w_g ||z_g||``;
    its blocks are the unpenalised parameters (solved jointly, by Cholesky)
    and each penalised group (the soft threshold ``-sign(r)(|r| - lam w)/h``
    for one parameter, :func:`_group_minimiser` for several); ``v`` is the
    model's gradient at ``z``.  Full sweeps alternate with sweeps over the
    non-zero groups only (the active set) until a full sweep moves no block
    by more than ``inner_tol`` in the model's metric; ``z0`` continues an
    earlier, looser solution.  Returns None if the unpenalised block is
    singular.
    """
    if lam == 0.0 or not spec.groups:
        fac = _chol_scaled(Hs)
        return None if fac is None else phi - _chol_solve(fac, gs)
    z = phi.copy() if z0 is None else z0.copy()
    v = gs.copy() if z0 is None else gs + Hs @ (z - phi)
    free = None
    if spec.free.size:
        Hff = Hs[np.ix_(spec.free, spec.free)]
        fac = _chol_scaled(Hff)
        if fac is None:
            return None
        free = (spec.free, Hff, fac)
    blocks = _group_blocks(Hs, spec, lam)
    for _ in range(_MAX_SWEEPS):
        if _sweep(z, v, Hs, free, blocks, False) <= inner_tol:
            break
        for _ in range(_MAX_SWEEPS):
            if _sweep(z, v, Hs, free, blocks, True) <= inner_tol:
                break
    return z


def _kkt(gs: np.ndarray, Hs: np.ndarray, phi: np.ndarray, spec: _Penalty, lam: float, W: float) -> float:
    """Largest violation of the optimality conditions, in standard-error-like units.

    Notes
    -----
    With ``gs`` the gradient of the smooth part (likelihood and ridge), the
    conditions are ``gs_j = 0`` for an unpenalised parameter,
    ``||gs_g|| <= lam w_g`` for a group at zero and
    ``gs_g + lam w_g b_g / ||b_g|| = 0`` otherwise.  Each violation is
    multiplied by ``sqrt(sum(w) / h)``, ``h`` the largest diagonal entry of
    the group's block of ``Hs``, which makes it a distance in units of the
    estimate's sampling spread and so independent of the columns' scale.
    """
    diag = np.maximum(np.diag(Hs), 1e-300)
    worst = float(np.max(np.abs(gs[spec.free]) * np.sqrt(W / diag[spec.free]))) if spec.free.size else 0.0
    for g, wt in zip(spec.groups, spec.weights):
        b = phi[g]
        nb = float(np.linalg.norm(b))
        if nb == 0.0:
            viol = max(0.0, float(np.linalg.norm(gs[g])) - lam * wt)
        else:
            viol = float(np.linalg.norm(gs[g] + lam * wt * b / nb))
        worst = max(worst, viol * math.sqrt(W / float(np.max(diag[g]))))
    return worst


class _Solved(NamedTuple):
    phi: np.ndarray  # parameters of the design d (centred)
    loglik: float
    objective: float
    converged: bool
    iterations: int
    singular: bool


def _smooth_parts(d: _Design, pc, phi: np.ndarray, spec: _Penalty, ridge: float):
    g, H = _grad_hess(d, pc)
    W = float(d.w.sum())
    gs = -g / W
    Hs = -H / W
    gs[spec.pen] += ridge * phi[spec.pen]
    Hs[spec.pen, spec.pen] += ridge
    return gs, Hs


def _solve(d: _Design, spec: _Penalty, alpha: float, l1: float, phi: np.ndarray, max_iter: int, tol: float) -> _Solved:
    """Proximal Newton with backtracking on the penalised objective; see :func:`fit_penalized` (Notes)."""
    W = float(d.w.sum())
    lam, ridge = alpha * l1, alpha * (1.0 - l1)
    F, ll, pc = _objective(d, phi, spec, alpha, l1)
    if not np.isfinite(F):
        phi = _default_start(d)
        F, ll, pc = _objective(d, phi, spec, alpha, l1)
    iterations, converged, singular = 0, False, False
    # The last step's inner sweeps stop when no block moves by more than tol
    # times tol (squared standard-error units), so it is exact to far below
    # tol; earlier steps need only be accurate to well within their own size
    # (Lee, Sun & Saunders 2014, section 3.3), any accuracy giving descent.
    exact = tol * tol / W
    loose = tol / W
    while True:
        gs, Hs = _smooth_parts(d, pc, phi, spec, ridge)
        z = _prox_newton_point(gs, Hs, phi, spec, lam, max(exact, loose))
        if z is None:
            singular = True
            break
        step = z - phi
        dec = W * float(step @ Hs @ step)
        if dec <= tol and loose > exact:
            z = _prox_newton_point(gs, Hs, phi, spec, lam, exact, z)
            step = z - phi
            dec = W * float(step @ Hs @ step)
        loose = 1e-4 * dec * dec / W
        if dec <= tol and _kkt(gs, Hs, phi, spec, lam, W) <= math.sqrt(tol) * 10.0 or not np.any(step):
            # One last full step, kept unless the objective rises beyond rounding.
            F_t, ll_t, pc_t = _objective(d, z, spec, alpha, l1)
            if np.any(step) and np.isfinite(F_t) and F_t <= F + 1e-13 * (1.0 + abs(F)):
                phi, F, ll, pc = z, F_t, ll_t, pc_t
                iterations += 1
            converged = True
            break
        if iterations >= max_iter:
            break
        accepted, t = False, 1.0
        predicted = float(gs @ step) + lam * (_l1_part(z, spec) - _l1_part(phi, spec))
        for _ in range(_MAX_HALVINGS):
            trial = phi + t * step
            F_t, ll_t, pc_t = _objective(d, trial, spec, alpha, l1)
            if np.isfinite(F_t) and F_t <= F + _ARMIJO * t * predicted:
                accepted = True
                break
            t *= 0.5
        if not accepted:
            converged = dec <= math.sqrt(tol)
            break
        phi, F, ll, pc = trial, F_t, ll_t, pc_t
        iterations += 1
    return _Solved(phi, float(ll), float(F), converged, iterations, singular)


def _design(inp: _Inputs, X: np.ndarray | None = None) -> _Design:
    X = inp.X if X is None else X
    return _make_design(X, inp.y, inp.K, inp.w, inp.off, inp.link, inp.proportional, inp.unit, center=True)


def _run(inp: _Inputs, d: _Design, spec: _Penalty, alpha: float, l1: float, start_nat, max_iter: int, tol: float) -> _Solved:
    """One fit on design ``d``; raises for collinear unpenalised columns when the model is singular."""
    phi0 = _default_start(d) if start_nat is None else _to_centred(d, np.asarray(start_nat, dtype=float))
    with one_blas_thread():
        out = _solve(d, spec, alpha, l1, phi0, max_iter, tol)
    if out.singular:
        free_cols = [j for j, c in enumerate(inp.columns) if c in set(inp.unpenalized)]
        _raise_if_collinear(inp.X[:, free_cols], inp.w, [inp.columns[j] for j in free_cols])
        if alpha * (1.0 - l1) == 0.0:
            _raise_if_collinear(inp.X, inp.w, inp.columns)
    return out


# --------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------


def _penalty_record(inp: _Inputs, alpha: float, l1: float, **extra) -> dict:
    return {
        "alpha": float(alpha),
        "l1_ratio": float(l1),
        "groups": None if inp.groups is None else {k: list(v) for k, v in inp.groups.items()},
        "unpenalized": list(inp.unpenalized),
        **extra,
    }


def _crossing(inp: _Inputs, phi: np.ndarray) -> int:
    m = inp.K - 1
    if inp.proportional or m < 2:
        return 0
    B = phi[m:].reshape(len(inp.columns), m)
    u = phi[:m][None, :] - inp.X @ B
    return int(np.sum(np.any(np.diff(u, axis=1) <= 0.0, axis=1)))


def _null_ll(inp: _Inputs) -> float:
    if inp.off is None:
        return _null_loglik(inp.y, inp.K, inp.w)
    return _fit_arrays(np.zeros((inp.y.shape[0], 0)), inp.y, inp.K, link=inp.link, offset=inp.off, weights=inp.w).loglik


def _assemble(inp: _Inputs, phi: np.ndarray, solved: _Solved, penalty: dict, max_iter: int, tol: float, stacklevel: int = 3) -> CumulativeFit:
    """A :class:`CumulativeFit` of natural-scale parameters ``phi``: no standard errors, no AIC."""
    m = inp.K - 1
    p = len(inp.columns)
    cuts, coef_names = _param_names(inp.columns, inp.levels, inp.proportional)
    msgs: list[str] = []
    if not solved.converged:
        why = "the quadratic model became singular" if solved.singular else f"no convergence after {solved.iterations} iterations"
        msgs.append(f"convergence: {why} (tol={tol:g}, max_iter={max_iter})")
        warnings.warn(msgs[-1], ConvergenceWarning, stacklevel=stacklevel)
    n_cross = _crossing(inp, phi)
    if n_cross:
        msgs.append(f"crossing: cumulative probabilities cross in {n_cross} of {inp.y.shape[0]} rows of the fitting data")
        warnings.warn(msgs[-1], CrossingWarning, stacklevel=stacklevel)
    names = pd.Index(cuts + coef_names, dtype=object)
    q = len(names)
    params = pd.Series(phi.copy(), index=names, name="estimate")
    if inp.proportional:
        coef: Any = pd.Series(phi[m:].copy(), index=names[m:], name="coef", dtype=float)
    else:
        coef = pd.DataFrame(phi[m:].reshape(p, m).copy(), index=pd.Index(list(inp.columns), dtype=object), columns=names[:m])
    ll0 = _null_ll(inp)
    n_nonzero = int(np.count_nonzero(phi[m:]))
    return CumulativeFit(
        link=inp.link, proportional=inp.proportional, levels=tuple(inp.levels), columns=tuple(inp.columns),
        thresholds=pd.Series(phi[:m].copy(), index=names[:m], name="threshold"), coef=coef, params=params,
        cov=pd.DataFrame(np.full((q, q), np.nan), index=names, columns=names), se=pd.Series(np.full(q, np.nan), index=names, name="se"),
        loglik=float(solved.loglik), loglik_null=float(ll0), n=float(inp.w.sum()), n_rows=int(inp.y.shape[0]),
        aic=math.nan, bic=math.nan, lr_test=LRTest(max(0.0, 2.0 * (solved.loglik - ll0)), n_nonzero, math.nan),
        converged=bool(solved.converged), iterations=int(solved.iterations), n_crossing=n_cross, separation=(),
        warnings=tuple(msgs), has_offset=inp.off is not None, max_iter=int(max_iter), tol=float(tol),
        estimation="penalized", penalty=penalty, interval_kind="none",
    )


def fit_penalized(
    X,
    y,
    *,
    alpha: float,
    l1_ratio: float = 0.0,
    link: str = "logit",
    proportional: bool = True,
    weights=None,
    offset=None,
    start=None,
    groups: Mapping[str, list] | None = None,
    unpenalized=(),
    max_iter: int = DEFAULT_MAX_ITER,
    tol: float = DEFAULT_TOL,
) -> CumulativeFit:
    """Fit a cumulative-link model with a ridge, lasso, elastic-net or group-lasso penalty.

    Parameters
    ----------
    X : pandas.DataFrame, 2-D array or None
        Model matrix without an intercept column, penalised on the columns
        as given (no standardisation; see :func:`tune_penalty` for that).
    y : array-like of int, or ordered pandas Categorical
        Outcome levels ``0..K-1`` (K >= 2).
    alpha : float, keyword-only
        Penalty strength, >= 0 (0 is maximum likelihood).
    l1_ratio : float, keyword-only
        Share of the (group) lasso part, in [0, 1]: 0 ridge, 1 lasso.
    link : {"logit", "probit", "cloglog", "loglog"}, keyword-only
        Link distribution F.
    proportional : bool, keyword-only
        One coefficient vector for all cuts (default) or one per cut.
    weights : array-like, optional, keyword-only
        Non-negative frequency weights; rows with weight 0 are dropped.
    offset : array-like, optional, keyword-only
        Known part of the linear predictor.
    start : CumulativeFit or array-like, optional, keyword-only
        Warm start (a previous fit, matched by column name, or a parameter
        vector in the order of ``params``); an unusable start falls back to
        the thresholds-only start.
    groups : mapping of str to list of str, optional, keyword-only
        Groups of columns penalised together by the group lasso; columns not
        listed are groups of their own.
    unpenalized : sequence of str, keyword-only
        Columns (whole groups) without penalty.
    max_iter : int, keyword-only
        Limit on proximal Newton iterations.
    tol : float, keyword-only
        Tolerance on the proximal Newton decrement (default 1e-8).

    Returns
    -------
    CumulativeFit
        With ``estimation="penalized"``, ``penalty`` holding ``alpha``,
        ``l1_ratio``, ``groups`` (None without groups) and ``unpenalized``,
        and ``interval_kind="none"``.  ``se`` and ``cov`` are NaN, and so are
        ``aic``, ``bic`` and the p-value of ``lr_test`` (whose ``df`` counts
        the non-zero coefficients): penalised estimates are biased towards
        zero by design and their sampling distribution is not the normal
        one of maximum likelihood, so Wald intervals and likelihood-ratio
        p-values would be wrong.  ``loglik`` is the unpenalised
        log-likelihood at the estimate.

    Raises
    ------
    FitError
        Bad input (as :func:`~riskvet.modelling.fitter.fit_cumulative`),
        unknown or overlapping group columns, a group only partly
        unpenalised, constant columns, or collinear unpenalised columns.

    Warns
    -----
    ConvergenceWarning
        The iteration limit was reached or no descent step could be found.
    CrossingWarning
        Non-proportional model whose cumulative probabilities cross on some
        rows of the fitting data.

    Notes
    -----
    The estimate minimises, over thresholds ``theta`` and coefficients ``b``,

        -l(theta, b) / sum(w) + alpha * (l1_ratio * P1(b) + (1 - l1_ratio) / 2 * ||b||^2),

    ``l`` the weighted log-likelihood and ``b`` the penalised coefficients,
    with ``P1(b) = sum_g sqrt(p_g) ||b_g||_2`` over groups of ``p_g``
    parameters (Yuan & Lin 2006); with one column per group this is the L1
    norm.  In the non-proportional model the ``K - 1`` per-cut coefficients
    of a column are one group (so ``p_g = K - 1`` for a column on its own):
    a column enters or leaves at every cut together.

    Algorithm: proximal Newton (Lee, Sun & Saunders 2014).  At each iterate
    the smooth part (negative log-likelihood and ridge term) is replaced by
    its second-order Taylor model, from the fitter's exact gradient and
    Hessian; the model plus the group penalty is minimised by block
    coordinate descent (Tseng 2001) over the unpenalised parameters (one
    block, solved by Cholesky) and each penalised group (the group
    soft-threshold), cycling over the groups that are not zero between full
    sweeps; the step to that minimiser
    is then backtracked until the true objective falls by at least
    ``1e-4`` of the predicted decrease.  Without an L1 part this is Newton's
    method.  The fit runs on columns centred at their weighted means, which
    moves only the (unpenalised) thresholds, and is mapped back exactly.
    Convergence: the decrement ``sum(w) d' H d`` of the step ``d`` (``H`` the
    model's Hessian) falls below ``tol`` and the optimality conditions hold
    to ``10 sqrt(tol)`` in standard-error units (:func:`_kkt`); one last
    full step follows.

    References
    ----------
    Hoerl, A. E., & Kennard, R. W. (1970). Ridge regression: biased estimation
    for nonorthogonal problems. Technometrics, 12(1), 55-67.

    Tibshirani, R. (1996). Regression shrinkage and selection via the lasso.
    Journal of the Royal Statistical Society, Series B, 58(1), 267-288.

    Zou, H., & Hastie, T. (2005). Regularization and variable selection via the
    elastic net. Journal of the Royal Statistical Society, Series B, 67(2),
    301-320.

    Yuan, M., & Lin, Y. (2006). Model selection and estimation in regression
    with grouped variables. Journal of the Royal Statistical Society, Series
    B, 68(1), 49-67.

    Lee, J. D., Sun, Y., & Saunders, M. A. (2014). Proximal Newton-type methods
    for minimizing composite functions. SIAM Journal on Optimization, 24(3),
    1420-1443.

    Tseng, P. (2001). Convergence of a block coordinate descent method for
    nondifferentiable minimization. Journal of Optimization Theory and
    Applications, 109(3), 475-494.

    Moré, J. J., & Sorensen, D. C. (1983). Computing a trust region step. SIAM
    Journal on Scientific and Statistical Computing, 4(3), 553-572.
    """
    _check_common(link, proportional, max_iter, tol)
    alpha = _check_alpha(alpha)
    l1 = _check_l1_ratio(l1_ratio)
    inp = _prepare(X, y, link=link, proportional=proportional, weights=weights, offset=offset, groups=groups, unpenalized=unpenalized)
    spec = _penalty_spec(inp)
    m = inp.K - 1
    q = m + len(inp.columns) * (1 if inp.proportional else m)
    phi0 = None if start is None else _start_vector(start, inp.columns, m, inp.proportional, q)
    if phi0 is not None and not np.all(np.isfinite(phi0)):
        phi0 = None
    d = _design(inp)
    solved = _run(inp, d, spec, alpha, l1, phi0, int(max_iter), float(tol))
    phi, _ = _to_natural(d, solved.phi)
    return _assemble(inp, phi, solved, _penalty_record(inp, alpha, l1), int(max_iter), float(tol))


# --------------------------------------------------------------------------
# Paths
# --------------------------------------------------------------------------


def _alpha_max(inp: _Inputs, d: _Design, spec: _Penalty, l1: float) -> float:
    """Smallest alpha at which every penalised group is zero (for ridge, see RIDGE_L1_FLOOR).

    Notes
    -----
    At the fit with the penalised coefficients at zero (thresholds and
    unpenalised columns by maximum likelihood), the groups stay at zero while
    ``||g_g|| <= alpha * l1_ratio * sqrt(p_g)`` for every group, ``g_g`` the
    gradient of ``-l / sum(w)``; so ``alpha_max = max_g ||g_g|| / (sqrt(p_g) l1_ratio)``,
    raised by a relative ``1e-8`` so that rounding leaves the first fit at zero.
    """
    if not spec.groups:
        raise FitError(problem("unpenalized", allowed="at least one penalised column for a penalty path", received=list(inp.unpenalized)))
    m = inp.K - 1
    free_cols = [j for j, c in enumerate(inp.columns) if c in set(inp.unpenalized)]
    raw = _fit_arrays(inp.X[:, free_cols], inp.y, inp.K, proportional=inp.proportional, link=inp.link, offset=inp.off,
                      weights=None if inp.unit else inp.w, names=[inp.columns[j] for j in free_cols], need_cov=False)
    phi = np.zeros(d.n_params)
    phi[:m] = raw.params[:m]
    per = 1 if inp.proportional else m
    for k, j in enumerate(free_cols):
        phi[m + j * per : m + (j + 1) * per] = raw.params[m + k * per : m + (k + 1) * per]
    _, pc = _evaluate(d, _to_centred(d, phi))
    gs = -_gradient(d, pc) / float(d.w.sum())
    top = max(float(np.linalg.norm(gs[g])) / wt for g, wt in zip(spec.groups, spec.weights))
    # A relative margin keeps the first fit exactly at zero despite rounding.
    return (1.0 + _ALPHA_MAX_MARGIN) * max(top, 1e-12) / max(l1, RIDGE_L1_FLOOR)


def _alpha_grid(alphas, n_alphas, alpha_min_ratio, top_fn, l1: float) -> np.ndarray:
    if alphas is not None:
        try:
            arr = np.asarray(alphas, dtype=float).ravel()
        except (TypeError, ValueError):
            raise FitError(problem("alphas", allowed="a list of numbers > 0", received=alphas)) from None
        if arr.size == 0 or not np.all(np.isfinite(arr)) or np.any(arr <= 0):
            raise FitError(problem("alphas", allowed="a non-empty list of finite numbers > 0", received=arr.tolist()))
        return np.unique(arr)[::-1]
    if not isinstance(n_alphas, (int, np.integer)) or isinstance(n_alphas, bool) or n_alphas < 2:
        raise FitError(problem("n_alphas", allowed="an integer >= 2", received=n_alphas))
    if alpha_min_ratio is None:
        alpha_min_ratio = RIDGE_ALPHA_MIN_RATIO if l1 < RIDGE_L1_FLOOR else DEFAULT_ALPHA_MIN_RATIO
    ok = isinstance(alpha_min_ratio, numbers.Real) and not isinstance(alpha_min_ratio, bool) and 0.0 < float(alpha_min_ratio) < 1.0
    if not ok:
        raise FitError(problem("alpha_min_ratio", allowed="a number in (0, 1)", received=alpha_min_ratio))
    top = top_fn()
    return top * np.geomspace(1.0, float(alpha_min_ratio), int(n_alphas))


def _path_arrays(inp: _Inputs, d: _Design, spec: _Penalty, alphas: np.ndarray, l1: float, max_iter: int, tol: float) -> list[_Solved]:
    """Fits along ``alphas`` (descending), each warm-started from the one before; parameters of ``d``."""
    out: list[_Solved] = []
    phi = _default_start(d)
    with one_blas_thread():
        for a in alphas:
            solved = _solve(d, spec, float(a), l1, phi, max_iter, tol)
            out.append(solved)
            if not solved.singular:
                phi = solved.phi
    return out


def _nonzero_groups(phi: np.ndarray, spec: _Penalty) -> int:
    return int(sum(bool(np.any(phi[g] != 0.0)) for g in spec.groups))


@dataclasses.dataclass(frozen=True, eq=False)
class PenaltyPath:
    """Penalised fits along a decreasing sequence of penalties.

    Attributes
    ----------
    alphas : numpy.ndarray
        Penalties, largest first.
    l1_ratio : float
        Share of the (group) lasso part.
    names : tuple of str
        Parameter names, thresholds first (the order of ``params`` columns).
    params : numpy.ndarray
        Natural-scale parameters, one row per alpha.
    loglik : numpy.ndarray
        Unpenalised log-likelihood at each alpha.
    n_nonzero_groups : numpy.ndarray
        Penalised groups with a non-zero coefficient, per alpha.
    converged : numpy.ndarray
        Convergence of each fit.
    iterations : numpy.ndarray
        Proximal Newton iterations of each fit.
    group_names : tuple of str
        The penalised groups (a column's name for a column on its own).
    unpenalized : tuple of str
        Columns without penalty.
    link : str
    proportional : bool
    warnings : tuple of str
        Trouble met along the path.
    """

    alphas: np.ndarray
    l1_ratio: float
    names: tuple
    params: np.ndarray
    loglik: np.ndarray
    n_nonzero_groups: np.ndarray
    converged: np.ndarray
    iterations: np.ndarray
    group_names: tuple
    unpenalized: tuple
    link: str
    proportional: bool
    warnings: tuple

    def to_frame(self) -> pd.DataFrame:
        """Long table: one row per alpha and parameter (alpha, parameter, estimate, loglik, n_nonzero_groups)."""
        k = len(self.names)
        return pd.DataFrame(
            {
                "alpha": np.repeat(self.alphas, k),
                "parameter": np.tile(np.array(self.names, dtype=object), len(self.alphas)),
                "estimate": self.params.ravel(),
                "loglik": np.repeat(self.loglik, k),
                "n_nonzero_groups": np.repeat(self.n_nonzero_groups, k),
            }
        )

    def to_dict(self) -> dict:
        """JSON-ready: settings, and per alpha its parameters, log-likelihood and convergence."""
        return to_jsonable(
            {
                "l1_ratio": self.l1_ratio,
                "link": self.link,
                "proportional": self.proportional,
                "names": list(self.names),
                "group_names": list(self.group_names),
                "unpenalized": list(self.unpenalized),
                "alphas": self.alphas,
                "params": self.params,
                "loglik": self.loglik,
                "n_nonzero_groups": self.n_nonzero_groups,
                "converged": self.converged,
                "iterations": self.iterations,
                "warnings": list(self.warnings),
            }
        )


def penalty_path(
    X,
    y,
    *,
    l1_ratio: float = 0.0,
    alphas=None,
    n_alphas: int = 30,
    alpha_min_ratio: float | None = None,
    groups: Mapping[str, list] | None = None,
    unpenalized=(),
    link: str = "logit",
    proportional: bool = True,
    weights=None,
    offset=None,
    max_iter: int = DEFAULT_MAX_ITER,
    tol: float = DEFAULT_TOL,
) -> PenaltyPath:
    """Penalised fits for a decreasing sequence of penalties, with warm starts.

    Parameters
    ----------
    X, y, groups, unpenalized, link, proportional, weights, offset, max_iter, tol
        As for :func:`fit_penalized` (columns as given, not standardised).
    l1_ratio : float, keyword-only
        Share of the (group) lasso part, in [0, 1].
    alphas : sequence of float, optional, keyword-only
        The penalties (sorted largest first); by default ``n_alphas`` values
        evenly spaced on the log scale from ``alpha_max`` down to
        ``alpha_min_ratio * alpha_max``.
    n_alphas : int, keyword-only
        Number of default penalties (>= 2).
    alpha_min_ratio : float, optional, keyword-only
        Smallest default penalty as a share of the largest; by default 1e-3,
        and 1e-4 for ridge (``l1_ratio`` below 0.01).

    Returns
    -------
    PenaltyPath

    Raises
    ------
    FitError
        Bad input, as :func:`fit_penalized`; no penalised column when the
        default grid is asked for.

    Warns
    -----
    ConvergenceWarning
        Some fit of the path did not converge (counted in ``warnings``).

    Notes
    -----
    ``alpha_max`` is the smallest penalty at which every penalised group is
    zero: ``max_g ||g_g|| / (sqrt(p_g) l1_ratio)``, ``g_g`` the gradient of
    ``-l / sum(w)`` with respect to group ``g`` at the fit with the
    penalised coefficients at zero.  A ridge penalty (``l1_ratio`` below
    0.01) sets no coefficient to zero at any finite penalty; its path then
    starts where an elastic net with ``l1_ratio = 0.01`` would set every
    coefficient to zero, which shrinks the ridge coefficients to about a
    hundredth of the gradient's size, and by default ends four orders of
    magnitude lower (three for the others), near the unpenalised fit.  Each fit starts from the one before
    (warm start), which changes the work, not the estimates: the objective
    is strictly convex in the penalised coefficients with a ridge part, and
    convex otherwise.

    References
    ----------
    Friedman, J., Hastie, T., & Tibshirani, R. (2010). Regularization paths for
    generalized linear models via coordinate descent. Journal of Statistical
    Software, 33(1), 1-22.
    """
    _check_common(link, proportional, max_iter, tol)
    l1 = _check_l1_ratio(l1_ratio)
    inp = _prepare(X, y, link=link, proportional=proportional, weights=weights, offset=offset, groups=groups, unpenalized=unpenalized)
    spec = _penalty_spec(inp)
    d = _design(inp)
    grid = _alpha_grid(alphas, n_alphas, alpha_min_ratio, lambda: _alpha_max(inp, d, spec, l1), l1)
    fits = _path_arrays(inp, d, spec, grid, l1, int(max_iter), float(tol))
    params = np.vstack([_to_natural(d, s.phi)[0] for s in fits])
    msgs = []
    bad = [float(a) for a, s in zip(grid, fits) if not s.converged]
    if bad:
        msgs.append(f"convergence: {len(bad)} of {len(grid)} fits of the path did not converge (alphas {bad})")
        warnings.warn(msgs[-1], ConvergenceWarning, stacklevel=2)
    cuts, coef_names = _param_names(inp.columns, inp.levels, inp.proportional)
    return PenaltyPath(
        alphas=grid, l1_ratio=l1, names=tuple(cuts + coef_names), params=params,
        loglik=np.array([s.loglik for s in fits]), n_nonzero_groups=np.array([_nonzero_groups(s.phi, spec) for s in fits]),
        converged=np.array([s.converged for s in fits]), iterations=np.array([s.iterations for s in fits]),
        group_names=spec.names, unpenalized=inp.unpenalized, link=inp.link, proportional=inp.proportional, warnings=tuple(msgs),
    )


# --------------------------------------------------------------------------
# Cross-validated choice of the penalty
# --------------------------------------------------------------------------


def _moments(X: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Weighted means and standard deviations (divisor ``sum(w)``); a constant column gets SD 1."""
    W = float(w.sum())
    mu = (w @ X) / W
    sd = np.sqrt((w @ (X - mu) ** 2) / W)
    return mu, np.where(sd > 1e-10 * np.maximum(1.0, np.abs(mu)), sd, 1.0)


def _unstandardise(phi: np.ndarray, mu: np.ndarray, sd: np.ndarray, m: int, proportional: bool) -> np.ndarray:
    """Parameters on standardised columns ``(x - mu) / sd`` back to the original columns.

    Notes
    -----
    ``theta_j - sum_k (x_k - mu_k) / sd_k b_jk = (theta_j + sum_k mu_k b_jk / sd_k) - sum_k x_k b_jk / sd_k``:
    coefficients are divided by ``sd`` and thresholds shifted by ``sum_k mu_k b_jk / sd_k``.
    """
    per = 1 if proportional else m
    B = phi[m:].reshape(mu.shape[0], per) / sd[:, None]
    out = np.empty_like(phi)
    out[:m] = phi[:m] + mu @ B
    out[m:] = B.ravel()
    return out


def _rng(seed) -> np.random.Generator:
    if isinstance(seed, np.random.Generator):
        return seed
    if isinstance(seed, (int, np.integer)) and not isinstance(seed, bool) and seed >= 0:
        return np.random.default_rng(int(seed))
    raise FitError(problem("seed", allowed="a non-negative integer or a numpy Generator", received=seed))


def _deal_folds(y: np.ndarray, K: int, n_folds: int, rng: np.random.Generator, levels) -> np.ndarray:
    """Fold of each row: the rows of each level in random order, dealt in turn (continuing across levels)."""
    counts = np.bincount(y, minlength=K)
    if np.any(counts < n_folds):
        tally = {levels[j]: int(counts[j]) for j in range(K)}
        raise DesignError(
            problem("n_folds", allowed=f"at most the number of rows in the smallest outcome level ({int(counts.min())})",
                    received=f"{n_folds} folds; rows by level {tally}")
        )
    fold = np.empty(y.shape[0], dtype=np.int64)
    dealt = 0
    for k in range(K):
        rows = rng.permutation(np.flatnonzero(y == k))
        fold[rows] = (dealt + np.arange(rows.size)) % n_folds
        dealt += rows.size
    return fold


def _subset(inp: _Inputs, rows: np.ndarray, X: np.ndarray | None = None) -> _Inputs:
    X = inp.X[rows] if X is None else X
    return inp._replace(X=X, y=inp.y[rows], w=inp.w[rows], off=None if inp.off is None else inp.off[rows])


def _fold_logliks(inp: _Inputs, spec: _Penalty, train: np.ndarray, grid: np.ndarray, l1: float) -> np.ndarray:
    """Held-out log-likelihood per unit weight at each alpha, the fit standardised on the training rows."""
    tr = _subset(inp, train)
    mu, sd = _moments(tr.X, tr.w)
    std = tr._replace(X=(tr.X - mu) / sd)
    d = _design(std)
    fits = _path_arrays(std, d, spec, grid, l1, DEFAULT_MAX_ITER, DEFAULT_TOL)
    if any(s.singular for s in fits):
        raise FitError(problem("unpenalized", allowed="unpenalised columns that vary within every training fold", received=list(inp.unpenalized)))
    test = ~train
    dt = _make_design(inp.X[test], inp.y[test], inp.K, inp.w[test], None, inp.link, inp.proportional, inp.unit, center=False)
    W = float(inp.w[test].sum())
    m = inp.K - 1
    out = np.empty(grid.shape[0])
    for i, s in enumerate(fits):
        phi = _unstandardise(_to_natural(d, s.phi)[0], mu, sd, m, inp.proportional)
        ll = _evaluate(dt, phi)[0]
        out[i] = ll / W if np.isfinite(ll) else -math.inf
    return out


def _choose(table: np.ndarray, grid: np.ndarray) -> tuple[int, np.ndarray, np.ndarray]:
    """Index of the largest alpha whose mean held-out log-likelihood ties the best (relative 1e-10)."""
    k = table.shape[0]
    mean = table.mean(axis=0)
    with np.errstate(invalid="ignore"):
        se = table.std(axis=0, ddof=1) / math.sqrt(k)
    best = float(np.max(mean))
    tied = np.flatnonzero(mean >= best - _TIE * (1.0 + abs(best))) if np.isfinite(best) else np.arange(grid.shape[0])
    return int(tied[0]), mean, se


@dataclasses.dataclass(frozen=True, eq=False)
class PenaltyChoice:
    """The penalty chosen by cross-validation, and the final fit at it.

    Attributes
    ----------
    alpha : float
        Chosen penalty (on the standardised columns).
    alphas : numpy.ndarray
        The grid tried, largest first (from all the data).
    l1_ratio : float
        Share of the (group) lasso part.
    cv : pandas.DataFrame
        Per alpha: alpha, mean_test_loglik (mean over folds of the held-out
        log-likelihood per unit weight), se (its standard error over folds),
        n_nonzero_groups (of the fit on all data).
    fold_loglik : numpy.ndarray
        Held-out log-likelihood per unit weight, folds by alphas.
    fit : CumulativeFit
        Fit on all data at ``alpha``, coefficients on the original scale; its
        ``penalty`` also holds ``"standardised": True``.
    center, scale : pandas.Series
        Weighted means and standard deviations of the columns on all data
        (the standardisation of the final fit).
    n_folds : int
    seed : int or None
        The seed, or None when a Generator was passed.
    warnings : tuple of str
        Trouble met: a choice at the smallest penalty of the grid, and the
        final fit's warnings.
    """

    alpha: float
    alphas: np.ndarray
    l1_ratio: float
    cv: pd.DataFrame
    fold_loglik: np.ndarray
    fit: CumulativeFit
    center: pd.Series
    scale: pd.Series
    n_folds: int
    seed: Any
    warnings: tuple = ()

    def to_frame(self) -> pd.DataFrame:
        """The cross-validation table (alpha, mean_test_loglik, se, n_nonzero_groups)."""
        return self.cv.copy()

    def to_dict(self) -> dict:
        """JSON-ready: the choice, the cross-validation table and the final fit."""
        return to_jsonable(
            {
                "alpha": self.alpha,
                "alphas": self.alphas,
                "l1_ratio": self.l1_ratio,
                "n_folds": self.n_folds,
                "seed": self.seed,
                "cv": self.cv,
                "fold_loglik": self.fold_loglik,
                "center": self.center,
                "scale": self.scale,
                "fit": self.fit,
                "warnings": list(self.warnings),
            }
        )


def _check_tuning(n_folds, weights, n: int) -> None:
    if not isinstance(n_folds, (int, np.integer)) or isinstance(n_folds, bool) or n_folds < 2:
        raise FitError(problem("n_folds", allowed="an integer >= 2", received=n_folds))
    if weights is not None:
        w = _as_vector(weights, "weights", n)
        if np.any(w != np.round(w)):
            raise FitError(problem("weights", allowed="whole frequency counts (rows are dealt to folds)", received=f"{int(np.sum(w != np.round(w)))} fractional"))


def tune_penalty(
    X,
    y,
    *,
    l1_ratio: float = 0.0,
    groups: Mapping[str, list] | None = None,
    unpenalized=(),
    n_folds: int = 10,
    seed=0,
    n_alphas: int = 30,
    link: str = "logit",
    proportional: bool = True,
    weights=None,
    clusters=None,
) -> PenaltyChoice:
    """Choose the penalty by k-fold cross-validated log-likelihood on standardised columns.

    Parameters
    ----------
    X, y, groups, unpenalized, link, proportional
        As for :func:`fit_penalized`.
    l1_ratio : float, keyword-only
        Share of the (group) lasso part, in [0, 1].
    n_folds : int, keyword-only
        Number of folds (>= 2, at most the rows of the smallest level).
    seed : int or numpy.random.Generator, keyword-only
        Source of the fold assignment.
    n_alphas : int, keyword-only
        Size of the penalty grid.
    weights : array-like, optional, keyword-only
        Whole frequency counts (a bootstrap resample): rows, not copies, are
        dealt to folds, so a row's copies stay in one fold.
    clusters : array of int, optional, keyword-only
        Cluster code of every row: whole clusters are dealt to folds
        (:func:`riskvet.modelling.folds.cluster_folds`).  Rows of weight 0
        must already be removed.

    Returns
    -------
    PenaltyChoice

    Raises
    ------
    DesignError
        Fewer rows in some outcome level than ``n_folds`` (folds would lack
        the level); the counts by level are named.
    FitError
        Bad input, as :func:`fit_penalized`; fractional weights; no
        penalised column.

    Warns
    -----
    ConvergenceWarning, CrossingWarning
        From the final fit, as :func:`fit_penalized`.

    Notes
    -----
    Every fit sees its columns standardised, ``(x - mean) / sd`` with the
    weighted mean and SD (divisor ``sum(w)``) of the rows it is fitted on,
    so the penalty treats the columns alike whatever their units; a column
    constant on a training fold is left unscaled (its coefficient stays 0).
    One grid of ``n_alphas`` penalties comes from all the data
    (:func:`penalty_path`, from ``alpha_max`` down to ``1e-3 alpha_max``, or
    ``1e-4 alpha_max`` for ridge).  A choice at the smallest penalty of the
    grid is warned about (the optimum may lie below it).
    Folds: the rows (with positive weight) of each outcome level, in random
    order, are dealt to folds in turn.  For each fold the path is fitted on
    the other folds with warm starts and the held-out log-likelihood per
    unit weight is computed on the original scale.  The chosen alpha has
    the largest mean over folds; a tie (means within a relative 1e-10, as
    happens when every coefficient is zero) goes to the largest alpha, the
    simplest model.  The final fit, on all data standardised, is mapped to
    the original columns: ``b = b_std / sd`` and
    ``theta_j = theta_j^std + sum_k mean_k b_std,jk / sd_k``.

    References
    ----------
    Van Houwelingen, J. C., & le Cessie, S. (1990). Predictive value of
    statistical models. Statistics in Medicine, 9(11), 1303-1325.

    Friedman, J., Hastie, T., & Tibshirani, R. (2010). Regularization paths for
    generalized linear models via coordinate descent. Journal of Statistical
    Software, 33(1), 1-22.

    Van Calster, B., van Smeden, M., De Cock, B., & Steyerberg, E. W. (2020).
    Regression shrinkage methods for clinical prediction models do not
    guarantee improved performance: simulation study. Statistical Methods in
    Medical Research, 29(11), 3166-3178.
    """
    _check_common(link, proportional, DEFAULT_MAX_ITER, DEFAULT_TOL)
    l1 = _check_l1_ratio(l1_ratio)
    inp = _prepare(X, y, link=link, proportional=proportional, weights=weights, offset=None, groups=groups, unpenalized=unpenalized)
    _check_tuning(n_folds, None if inp.unit else inp.w, inp.y.shape[0])
    spec = _penalty_spec(inp)
    rng = _rng(seed)
    if clusters is None:
        fold = _deal_folds(inp.y, inp.K, int(n_folds), rng, inp.levels)
    else:
        codes = np.asarray(clusters, dtype=np.int64)
        if codes.shape != inp.y.shape:
            raise FitError(problem("clusters", allowed=f"{inp.y.shape[0]} cluster codes, one per row", received=f"shape {codes.shape}"))
        fold = cluster_folds(codes, inp.y, int(n_folds), rng, inp.levels, where="selection.folds")
    mu, sd = _moments(inp.X, inp.w)
    full = inp._replace(X=(inp.X - mu) / sd)
    d_full = _design(full)
    grid = _alpha_grid(None, n_alphas, None, lambda: _alpha_max(full, d_full, spec, l1), l1)
    table = np.vstack([_fold_logliks(inp, spec, fold != k, grid, l1) for k in range(int(n_folds))])
    best, mean, se = _choose(table, grid)
    fits = _path_arrays(full, d_full, spec, grid, l1, DEFAULT_MAX_ITER, DEFAULT_TOL)
    solved = fits[best]
    phi = _unstandardise(_to_natural(d_full, solved.phi)[0], mu, sd, inp.K - 1, inp.proportional)
    record = _penalty_record(inp, float(grid[best]), l1, standardised=True)
    fit = _assemble(inp, phi, solved, record, DEFAULT_MAX_ITER, DEFAULT_TOL)
    cv = pd.DataFrame({"alpha": grid, "mean_test_loglik": mean, "se": se,
                       "n_nonzero_groups": [_nonzero_groups(s.phi, spec) for s in fits]})
    names = pd.Index(list(inp.columns), dtype=object)
    msgs = []
    if best == grid.shape[0] - 1:
        msgs.append(f"penalty: the chosen alpha {grid[best]:.3g} is the smallest of the grid; the cross-validated optimum may lie below it")
        warnings.warn(msgs[-1], RiskvetWarning, stacklevel=2)
    msgs.extend(f"final fit: {m}" for m in fit.warnings)
    return PenaltyChoice(
        alpha=float(grid[best]), alphas=grid, l1_ratio=l1, cv=cv, fold_loglik=table, fit=fit,
        center=pd.Series(mu, index=names, name="mean"), scale=pd.Series(sd, index=names, name="sd"),
        n_folds=int(n_folds), seed=None if isinstance(seed, np.random.Generator) else int(seed), warnings=tuple(msgs),
    )
