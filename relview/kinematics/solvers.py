"""Root solvers shared by every motion kind: the safeguarded Newton iteration for the
retarded-time and simultaneity conditions, and the closed-form light delay of an
inertial point (the one place that quadratic is solved)."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

_EPS = np.finfo(float).eps
#: Relative tolerance of the retarded-time and simultaneity solves (of the light-travel
#: distance, resp. of the time offset), plus a few ulp of the absolute time.
SOLVER_RTOL = 1e-12


def _solve_increasing(
    fun: Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]],
    guess: np.ndarray,
    step: np.ndarray,
    tol: np.ndarray,
    max_expand: int = 120,
    max_iter: int = 200,
) -> np.ndarray:
    """Roots of strictly increasing functions h_i(s), vectorised over i.

    ``fun(s, idx)`` returns (h, dh/ds) for the entries ``idx``.  A bracket is found
    by stepping out from ``guess`` with doubling steps; then Newton's method runs,
    falling back to bisection whenever a Newton step leaves the bracket (safeguarded
    Newton, e.g. Press et al., Numerical Recipes, 3rd ed., §9.4 'rtsafe').
    Entries with no sign change within the expansion limit come back NaN.
    """
    # A bracket that runs out to infinity (a worldline whose past never reaches the
    # camera, e.g. beyond a hyperbolic horizon) makes inf - inf and inf / inf on purpose:
    # those entries end as NaN (no root), which is the answer, not a fault to warn about.
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        return _solve_increasing_unguarded(fun, guess, step, tol, max_expand, max_iter)


def _solve_increasing_unguarded(fun, guess, step, tol, max_expand, max_iter) -> np.ndarray:
    n = guess.size
    everyone = np.arange(n)
    s = guess.astype(float).copy()
    lo = np.full(n, -np.inf)
    hi = np.full(n, np.inf)
    h, _ = fun(s, everyone)
    root = h == 0.0
    lo[h < 0] = s[h < 0]
    hi[h > 0] = s[h > 0]
    step = np.maximum(np.asarray(step, float).copy(), 1e-300)
    for _ in range(max_expand):
        idx = np.nonzero(~root & ~(np.isfinite(lo) & np.isfinite(hi)))[0]
        if idx.size == 0:
            break
        going_up = np.isfinite(lo[idx])
        trial = np.where(going_up, lo[idx] + step[idx], hi[idx] - step[idx])
        ht, _ = fun(trial, idx)
        lo[idx[ht < 0]] = trial[ht < 0]
        hi[idx[ht > 0]] = trial[ht > 0]
        hit = idx[ht == 0]
        s[hit] = trial[ht == 0]
        root[hit] = True
        step[idx] *= 2.0
    failed = ~root & ~(np.isfinite(lo) & np.isfinite(hi))
    with np.errstate(invalid="ignore"):
        mid = 0.5 * (lo + hi)
    x = np.where(root, s, np.where(failed, np.nan, mid))
    # Start Newton from the guess when it lies in the bracket (usually it is close).
    inside = ~root & ~failed & (guess >= lo) & (guess <= hi)
    x[inside] = guess[inside]
    active = ~root & ~failed
    for _ in range(max_iter):
        idx = np.nonzero(active)[0]
        if idx.size == 0:
            break
        xi = x[idx]
        h, dh = fun(xi, idx)
        lo[idx] = np.where(h < 0, xi, lo[idx])
        hi[idx] = np.where(h > 0, xi, hi[idx])
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = xi - h / dh
            small = (dh > 0) & (np.abs(h / dh) <= tol[idx])
        ok = (dh > 0) & (newton >= lo[idx]) & (newton <= hi[idx])
        xn = np.where(ok | small, newton, 0.5 * (lo[idx] + hi[idx]))
        done = (h == 0) | small | (hi[idx] - lo[idx] <= tol[idx])
        x[idx] = np.where(h == 0, xi, xn)
        active[idx[done]] = False
    return x


def inertial_light_delay(r: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """Light-travel time tau >= 0 (ct, m) from points moving with constant ``beta`` (3,) to a
    camera event, for (N, 3) separations ``r`` = x_c - x(t_c) taken at the camera's time.

    |r + beta tau| = tau gives (1 - b^2) tau^2 - 2 (r.beta) tau - r^2 = 0 (e.g. Mueller &
    Boblest 2014, Eur. J. Phys. 35 065025); the non-negative root, in the form without
    cancellation for either sign of r.beta (Numerical Recipes, 3rd ed., section 5.6).
    """
    rb = r @ beta
    r2 = np.sum(r * r, axis=1)
    one_b2 = 1.0 - float(beta @ beta)
    root = np.sqrt(rb * rb + one_b2 * r2)
    with np.errstate(divide="ignore", invalid="ignore"):
        tau = np.where(rb >= 0, (rb + root) / one_b2, r2 / (root - rb))
    return np.where(r2 == 0, 0.0, tau)
