"""Compiled row loops of the proportional cumulative-logit fitter, for resampling.

The fitter's Newton iterations on a few thousand rows spend most of their
time not on arithmetic but on the fixed cost of numpy calls on small arrays:
the log-likelihood and its per-row derivative pieces take about 30 numpy
calls (:func:`riskvet.modelling.fitter._evaluate`), the threshold part of
the gradient and Hessian another 15 (:func:`riskvet.modelling.fitter._grad_hess`).
The loops here do the same arithmetic in one pass over the rows each,
compiled by numba.

They run only inside :func:`compiled` blocks: every resampling item
(bootstrap replicate, cross-validation fold, left-out cluster, external or
updating replicate) that ``riskvet.validation.bootstrap._execute`` runs,
thousands of small fits in each worker process.  Everywhere else the numpy
code runs.  The reason is measured: importing numba and reading the compiled loops from its
cache costs 0.5-0.7 s in every new process, more than a record stage that
fits a handful of models saves, while a bootstrap replicate of the
benchmark's forward selection takes 0.29 s instead of 0.35 s (17 % less;
``tests/benchmarks/bench_bootstrap.py`` prints both).  Every item runs on
the same path whatever the number of workers, so results stay identical
across worker counts and the Dask cluster.  ``RISKVET_KERNELS=numpy`` in the
environment keeps the numpy path everywhere (the reference).

Each loop computes the same formulas as the numpy code, in the same order
within a row, so the pieces agree to rounding (the exponential is the C
library's, not numpy's; on the 1,800-row case below the pieces came out
identical); sums over rows are taken row by row rather than pairwise.
``tests/test_kernels.py`` checks both paths against each other and the fit
against statsmodels.

Measured on the project's 2-core machine (1,800 rows, 3 levels, 15 columns,
one BLAS thread): the pieces in 49-64 us against 97-107 us, the gradient
alone in 29 us against 36 us (a test suite sharing the machine).
"""

from __future__ import annotations

import contextlib
import importlib.util
import math
import os

import numpy as np

__all__ = ["available", "enabled", "compiled", "mode"]

# numba is imported, and the loops compiled or read from numba's cache, at
# the first call inside a compiled() block.
_AVAILABLE = importlib.util.find_spec("numba") is not None
_ALLOWED = _AVAILABLE and os.environ.get("RISKVET_KERNELS", "").strip().lower() != "numpy"
_ENABLED = False


def available() -> bool:
    """True when numba is installed."""
    return _AVAILABLE


def enabled() -> bool:
    """True when the compiled loops are in use here and now."""
    return _ENABLED


def mode() -> str:
    """Where the compiled loops run in this process, in words (for the record's manifest)."""
    if not _AVAILABLE:
        return "numpy everywhere (numba is not installed)"
    if not _ALLOWED:
        return "numpy everywhere (RISKVET_KERNELS=numpy)"
    return "numpy; compiled loops (numba) in resampling replicates, folds and left-out clusters"


@contextlib.contextmanager
def compiled():
    """Run the block on the compiled loops (when numba is installed and not switched off)."""
    global _ENABLED
    before = _ENABLED
    _ENABLED = _ALLOWED
    try:
        yield
    finally:
        _ENABLED = before


_PYTHON = {}


def _jit(func):
    """Register ``func`` for compilation; until then its name calls a stub that compiles everything first."""
    _PYTHON[func.__name__] = func

    def first_call(*args):
        _compile()
        return globals()[func.__name__](*args)

    first_call.__doc__ = func.__doc__
    return first_call


def _compile() -> None:
    import numba

    # error_model="numpy": a zero probability gives -inf and nan as numpy
    # does (the caller rejects the point), never an exception.
    jit = numba.njit(cache=True, error_model="numpy", nogil=True)
    g = globals()
    g["_logit_at"] = jit(_PYTHON["_logit_at"])  # first: the loops below call it
    for name, func in _PYTHON.items():
        if name != "_logit_at":
            g[name] = jit(func)


@_jit
def _logit_at(t):  # pragma: no cover - compiled
    # as fitter._logit_parts: clipping at +-700 keeps exp finite and moves no value
    if t > 700.0:
        t = 700.0
    elif t < -700.0:
        t = -700.0
    e = math.exp(-t)
    F = 1.0 / (1.0 + e)
    S = e * F
    f = F * S
    return F, S, f, f * (S - F)


@_jit
def logit_pieces(eta, theta, y, n_a, s1, w, unit):  # pragma: no cover - compiled
    """Log-likelihood and the compact pieces of :func:`riskvet.modelling.fitter._evaluate` (logit link).

    ``eta`` holds each sorted row's linear predictor (offset included),
    ``theta`` the thresholds, ``y`` the sorted levels; a row has an upper
    argument ``theta[y] - eta`` when it is among the first ``n_a`` and a
    lower one ``theta[y - 1] - eta`` from ``s1`` on.
    """
    n = y.shape[0]
    n_mid = n_a - s1
    la = np.empty(n_a)
    laa = np.empty(n_a)
    lb = np.empty(n - s1)
    lbb = np.empty(n - s1)
    lab = np.empty(max(n_mid, 0))
    P = np.empty(n)
    ll = 0.0
    for i in range(n):
        k = y[i]
        ra = qa = rb = qb = 0.0
        Fa = Sa = Fb = Sb = 0.0
        fa = dfa = fb = dfb = 0.0
        tb = 0.0
        if i < n_a:
            Fa, Sa, fa, dfa = _logit_at(theta[k] - eta[i])
        if i >= s1:
            tb = theta[k - 1] - eta[i]
            Fb, Sb, fb, dfb = _logit_at(tb)
        if i < s1:
            p = Fa
        elif i >= n_a:
            p = Sb
        elif tb > 0.0:
            p = Sb - Sa
        else:
            p = Fa - Fb
        P[i] = p
        wi = 1.0 if unit else w[i]
        ll += np.log(p) if unit else wi * np.log(p)
        if i < n_a:
            ra = fa / p
            qa = dfa / p
            la[i] = ra * wi
            laa[i] = (qa - ra * ra) * wi
        if i >= s1:
            rb = fb / p
            qb = dfb / p
            lb[i - s1] = -rb * wi
            lbb[i - s1] = (-qb - rb * rb) * wi
        if s1 <= i < n_a:
            lab[i - s1] = ra * rb * wi
    return ll, la, lb, laa, lbb, lab, P


@_jit
def threshold_rows(la, lb, laa, lbb, lab, starts, n, m, out):  # pragma: no cover - compiled
    """Threshold parts of the proportional model's gradient and Hessian, and the row weights of the rest.

    Fills ``out`` (``(m + 1) x n``, zeroed here) with, per threshold ``j``, the
    weights of the threshold-coefficient block, then the weights ``l_a +
    l_b`` of the coefficients' gradient; returns the threshold gradient,
    the threshold block of the Hessian and the weights ``h`` of ``X' diag(h) X``
    (see :func:`riskvet.modelling.fitter._grad_hess`, Notes).
    """
    s1 = starts[1]
    n_a = starts[m]
    gt = np.zeros(m)
    Ht = np.zeros((m, m))
    h = np.zeros(n)
    out[:, :] = 0.0
    for i in range(n):
        # level of row i: the rows of level k are starts[k] .. starts[k + 1]
        u = 0.0
        v = 0.0
        if i < n_a:
            u = laa[i]
            if i >= s1:
                u += lab[i - s1]
        if i >= s1:
            v = lbb[i - s1]
            if i < n_a:
                v += lab[i - s1]
        h[i] = u + v
        g = 0.0
        if i < n_a:
            g += la[i]
        if i >= s1:
            g += lb[i - s1]
        out[m, i] = g
    for j in range(m):
        # rows of level j carry threshold j as their upper one, rows of level j + 1 as their lower one
        a = 0.0
        aa = 0.0
        for i in range(starts[j], starts[j + 1]):
            a += la[i]
            aa += laa[i]
            uu = laa[i]
            if i >= s1:
                uu += lab[i - s1]
            out[j, i] = uu
        b = 0.0
        bb = 0.0
        for i in range(starts[j + 1], starts[j + 2]):
            b += lb[i - s1]
            bb += lbb[i - s1]
            vv = lbb[i - s1]
            if i < n_a:
                vv += lab[i - s1]
            out[j, i] = vv
        gt[j] = a + b
        Ht[j, j] = aa + bb
        if j + 1 < m:
            c = 0.0
            for i in range(starts[j + 1], starts[j + 2]):
                c += lab[i - s1]
            Ht[j, j + 1] = c
            Ht[j + 1, j] = c
    return gt, Ht, h


@_jit
def threshold_gradient(la, lb, starts, n, m):  # pragma: no cover - compiled
    """Threshold gradient and the coefficients' row weights ``l_a + l_b`` (see :func:`threshold_rows`)."""
    s1 = starts[1]
    n_a = starts[m]
    gt = np.zeros(m)
    gs = np.zeros(n)
    for i in range(n):
        g = 0.0
        if i < n_a:
            g += la[i]
        if i >= s1:
            g += lb[i - s1]
        gs[i] = g
    for j in range(m):
        a = 0.0
        for i in range(starts[j], starts[j + 1]):
            a += la[i]
        b = 0.0
        for i in range(starts[j + 1], starts[j + 2]):
            b += lb[i - s1]
        gt[j] = a + b
    return gt, gs
