"""The register's open cycles: exact figures conditioned on where each cycle stands now.

A cycle that has seen n units with d nonconforming and is still open goes on
as the same plan started from (n, d): every continuation of m more units with
k nonconforming has probability p**k (1-p)**(m-k), and whether it is still
open depends on the continuation only (Wald 1947, appendix A.2; the same
argument as :mod:`service.stats.exact`, started from (n, d) instead of (0, 0)).
So for a true rate p

    P(stop at (n', d') | (n, d), p) = K_(n,d)(n', d') p**(d'-d) (1-p)**(n'-n-d'+d),

where K_(n,d) counts the open paths from (n, d) that first stop at (n', d').

Many cycles share a plan and a state, and cycles of one plan at different
states walk the same band of the (n, d) lattice. The figures are therefore
computed once per distinct (plan, n, d), and all states of one plan are
carried forward together by the forward recursion of Jennison and Turnbull
(2000, ch. 19) over absolute n, in probability (not log) space, vectorised
over rates and states: a state joins the recursion at its own n with mass 1
at its own d. The probability of each state ending flagged or cleared, its
expected further units and the quantiles of further units follow from the
stop masses; the whole stop distribution can be kept for simulation.

The register-level error target (:func:`register_alpha`) uses Bonferroni's
inequality and Šidák's (1967) product inequality.

References
----------
.. [1] A. Wald, "Sequential Analysis", Wiley, 1947, appendix A.2.
.. [2] C. Jennison and B. W. Turnbull, "Group Sequential Methods with
       Applications to Clinical Trials", Chapman & Hall/CRC, 2000, ch. 19.
.. [3] C. E. Bonferroni, "Teoria statistica delle classi e calcolo delle
       probabilità", Pubblicazioni del R. Istituto Superiore di Scienze
       Economiche e Commerciali di Firenze 8, 1936, 3-62.
.. [4] Z. Šidák, "Rectangular confidence regions for the means of multivariate
       normal distributions", Journal of the American Statistical Association
       62 (1967), 626-633.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .exact import MAX_STEPS, RESIDUAL_TOL, _rates
from .sprt import MONITORING, SprtPlan

#: Quantiles of the further units reported per state.
QUANTILES = (0.5, 0.9)
_CHECK_EVERY = 64



@dataclass(frozen=True)
class StopLaw:
    """The whole stop distribution of open states, in a form that samples exactly.

    Units up to ``front`` (the largest starting n) are kept per state in
    ``early_cdf``; what is still open at ``front`` is ``front_mass`` over the
    open d there, and from each of those points the common ``late_cdf``.
    """

    base: int
    front: int
    front_lo: int
    early_cdf: np.ndarray      # (R, S, front - base + 1): P(N <= base + t)
    front_mass: np.ndarray     # (R, S, W): P(open at (front, front_lo + j))
    late_cdf: np.ndarray       # (R, W, T): P(N <= front + t | open at (front, front_lo + j))


@dataclass(frozen=True)
class StateFigures:
    """Exact figures of open states (n, d) of one plan at each rate in ``p``.

    Attributes
    ----------
    p : ndarray, shape (R,)
    n, d : ndarray, shape (S,)
        The states, as given.
    p_flag, p_clear : ndarray, shape (R, S)
        Probability that a cycle at this state ends flagged / cleared.
    further : ndarray, shape (R, S)
        Expected further units to a decision, E[N - n | n, d].
    quantiles : dict of float -> ndarray of int, shape (R, S)
        Smallest m with P(N - n <= m) >= q (-1 where not reached).
    residual : ndarray, shape (R, S)
        Mass still open when the recursion stopped (0 for capped plans).
    law : StopLaw or None
        The stop distribution of the distinct states, when it was kept;
        ``index`` maps each given state to its distinct state.
    """

    p: np.ndarray
    n: np.ndarray
    d: np.ndarray
    p_flag: np.ndarray
    p_clear: np.ndarray
    further: np.ndarray
    quantiles: dict
    residual: np.ndarray
    law: StopLaw | None = None
    index: np.ndarray | None = None

    def draw_further(self, row: int, state: int, u: np.ndarray) -> np.ndarray:
        """Further units to a decision of state ``state`` at rate ``p[row]``, one per uniform."""
        u = np.asarray(u, dtype=float)
        return self.draw_many(row, np.full(u.shape, state, dtype=np.int64), u)

    def draw_many(self, row: int, states: np.ndarray, u: np.ndarray) -> np.ndarray:
        """Further units to a decision at rate ``p[row]``: one draw per (state, uniform) pair.

        Exact inverse-transform sampling: a uniform below the state's early
        stop mass picks the early stop; above it, it picks the open point at
        ``front`` in proportion to its mass and, rescaled to (0, 1], the stop
        from that point. Draws in the open residual (below 1e-12 for
        untruncated plans) get the last unit computed. Every search runs over
        all draws at once: the rows of a CDF table are laid end to end with
        row k shifted by 2k, so one ``searchsorted`` serves every row.
        """
        law = self.law
        if law is None:
            raise ValueError("the stop distribution was not kept")
        u = np.asarray(u, dtype=float).reshape(-1)
        k = self.index[np.asarray(states, dtype=np.int64).reshape(-1)]
        out = np.empty(u.size, dtype=np.int64)
        early = law.early_cdf[row]                                  # (S, L)
        top = early[k, -1]
        in_early = u <= top
        if in_early.any():
            out[in_early] = _row_search(early, k[in_early], u[in_early]) + law.base
        late = ~in_early
        if late.any():
            v = u[late] - top[late]
            kk = k[late]
            fm = law.front_mass[row]                                # (S, W)
            cm = np.cumsum(fm, axis=1)
            j = np.minimum(_row_search(cm, kk, v), fm.shape[1] - 1)
            prev = np.where(j > 0, cm[kk, np.maximum(j - 1, 0)], 0.0)
            mass = fm[kk, j]
            w = np.clip((v - prev) / np.where(mass > 0, mass, 1.0), 0.0, 1.0)
            cdf = law.late_cdf[row]                                 # (W, T)
            t = np.minimum(_row_search(cdf, j, w), cdf.shape[1] - 1)
            out[late] = t + law.front
        return out - self.n[np.asarray(states, dtype=np.int64).reshape(-1)]


def _row_search(table: np.ndarray, rows: np.ndarray, values: np.ndarray) -> np.ndarray:
    """``searchsorted(table[rows[i]], values[i], 'left')`` for every i, in one call.

    Each row is nondecreasing within [0, 1] (up to rounding): shifting row r by 2r
    makes the whole table one sorted array.
    """
    width = table.shape[1]
    shift = 2.0 * np.arange(table.shape[0])
    flat = (np.minimum(table, 1.0) + shift[:, None]).reshape(-1)
    pos = np.searchsorted(flat, values + shift[rows], side="left")
    return np.clip(pos - rows * width, 0, width)


def _check_states(plan: SprtPlan, n: np.ndarray, d: np.ndarray) -> None:
    if n.shape != d.shape or n.ndim != 1:
        raise ValueError("n and d must be 1-d arrays of one length")
    if n.size and (n.min() < 0 or d.min() < 0 or (d > n).any()):
        raise ValueError("states need 0 <= d <= n")
    lo = plan.acceptance_numbers(n)
    hi = plan.rejection_numbers(n)
    open_ = (d > lo) & (d < hi)
    if plan.max_units is not None:
        open_ &= n < plan.max_units
    if not open_.all():
        bad = int(np.flatnonzero(~open_)[0])
        raise ValueError(f"state (n={int(n[bad])}, d={int(d[bad])}) is not open under the plan "
                         f"(it is {plan.decide(int(n[bad]), int(d[bad]))})")


def conditioned(plan: SprtPlan, n, d, p, residual_tol: float = RESIDUAL_TOL,
                max_steps: int = MAX_STEPS, keep_distribution: bool = False) -> StateFigures:
    """Exact figures of open cycles of ``plan`` at states (n, d), for each rate in ``p``.

    Parameters
    ----------
    plan : SprtPlan
    n, d : array_like of int, shape (S,)
        Units so far and nonconforming units so far; every state must be
        open (``plan.decide(n, d) == "monitoring"``). Repeated states are
        computed once.
    p : array_like of float in [0, 1], shape (R,)
    residual_tol : float
        Untruncated plans stop once every state's open mass is below this at
        every rate.
    max_steps : int
        Hard limit on further units for untruncated plans.
    keep_distribution : bool
        Keep the whole stop distribution (``law``) for simulation.

    Notes
    -----
    States enter the forward recursion (Jennison and Turnbull 2000, ch. 19)
    at their own n and are carried together up to the largest n among them,
    the *front*. From there every state's future is a mixture of the futures
    of the few open points at the front, weighted by its mass there, so the
    long tail is computed once per open point at the front, not per state
    (the Markov property of the walk; Wald 1947, appendix A.2). Started at
    (0, 0) this is the exact engine's recursion, and the tests check both
    against enumeration of every path.
    """
    p = _rates(p)
    n_in = np.asarray(n, dtype=np.int64).reshape(-1)
    d_in = np.asarray(d, dtype=np.int64).reshape(-1)
    _check_states(plan, n_in, d_in)
    if n_in.size == 0:
        z = np.zeros((p.size, 0))
        return StateFigures(p=p, n=n_in, d=d_in, p_flag=z, p_clear=z, further=z,
                            quantiles={q: np.zeros((p.size, 0), dtype=np.int64)
                                       for q in QUANTILES}, residual=z)
    keys, inverse = np.unique(np.stack([n_in, d_in], axis=1), axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    fig, law = _figures(plan, keys[:, 0], keys[:, 1], p, residual_tol, max_steps,
                        keep_distribution)
    out = {k: v[:, inverse] for k, v in fig.items() if k != "quantiles"}
    out["quantiles"] = {q: v[:, inverse] for q, v in fig["quantiles"].items()}
    return StateFigures(p=p, n=n_in, d=d_in, law=law, index=inverse if keep_distribution else None,
                        **out)


def _bands(plan: SprtPlan, first: int, last: int) -> tuple[list, list]:
    """Open d range [lo, hi] at every n in first..last (lists, indexed from ``first``)."""
    ns = np.arange(first, last + 1)
    lo = (plan.acceptance_numbers(ns) + 1).tolist()
    hi = np.minimum(plan.rejection_numbers(ns) - 1, ns).tolist()
    return lo, hi


class _Walker:
    """Masses of many starting points over the open band, stepped one unit at a time.

    ``mass`` has shape (W, rows): one row of the band per d (contiguous, so
    every operation runs over all starting points at once).
    """

    def __init__(self, plan: SprtPlan, n: int, pr: np.ndarray, rows: int):
        self.plan, self.n = plan, n
        self.pr = pr
        self.qr = 1.0 - pr
        self.lo = int(plan.acceptance_numbers(n)) + 1
        self.hi = int(min(plan.rejection_numbers(n) - 1, n))
        self.mass = np.zeros((self.hi - self.lo + 1, rows))
        self._band_at = n + 1
        self._band = ([], [])

    def step(self) -> tuple[np.ndarray, np.ndarray]:
        """Advance one unit; returns the (cleared, flagged) mass of each row at the new n."""
        n1 = self.n + 1
        i = n1 - self._band_at
        if i >= len(self._band[0]):
            stop = n1 + 4095
            if self.plan.max_units is not None:
                stop = min(stop, self.plan.max_units)
            self._band, self._band_at, i = _bands(self.plan, n1, stop), n1, 0
        new_lo, new_hi = self._band[0][i], self._band[1][i]
        mass, lo = self.mass, self.lo
        w = mass.shape[0]
        ext = np.empty((w + 1, mass.shape[1]))
        np.multiply(mass, self.qr, out=ext[:w])
        ext[w] = 0.0
        ext[1:] += mass * self.pr
        a = max(new_lo - lo, 0)
        b = max(new_hi - lo + 1, a)
        cleared = ext[:a].sum(axis=0)
        flagged = ext[b:].sum(axis=0)
        self.mass = ext[a:b]
        self.lo, self.hi, self.n = lo + a, lo + b - 1, n1
        return cleared, flagged

    def cut(self) -> tuple[np.ndarray, np.ndarray]:
        """At the cap: split what is open by the cut rule; returns (cleared, flagged)."""
        d = np.arange(self.lo, self.hi + 1)
        flag = d >= int(self.plan.cut_numbers(self.n))
        out = self.mass[~flag].sum(axis=0), self.mass[flag].sum(axis=0)
        self.mass = self.mass[:0]
        return out


def _tail(plan: SprtPlan, front: int, p: np.ndarray, residual_tol: float,
          max_steps: int) -> dict:
    """Futures of the open points (front, d), kept for the last few (plan, front, rates):
    the arrays are read-only and depend on nothing else."""
    key = (plan, front, tuple(p.tolist()), residual_tol, max_steps)
    got = _TAILS.get(key)
    if got is None:
        got = _tail_run(plan, front, p, residual_tol, max_steps)
        for v in got.values():
            if isinstance(v, np.ndarray):
                v.flags.writeable = False
        if len(_TAILS) >= 64:
            _TAILS.pop(next(iter(_TAILS)))
        _TAILS[key] = got
    return got


_TAILS: dict = {}


def _tail_run(plan: SprtPlan, front: int, p: np.ndarray, residual_tol: float,
              max_steps: int) -> dict:
    """Futures of the open points (front, d): stop distribution over absolute n from front.

    Rows are r * W + j for rate r and open point j (d = lo + j).
    """
    R = p.size
    probe = _Walker(plan, front, np.zeros((1, 1)), 1)
    W = probe.hi - probe.lo + 1
    walker = _Walker(plan, front, np.repeat(p, W).reshape(1, R * W), R * W)
    walker.mass[np.tile(np.arange(W), R), np.arange(R * W)] = 1.0
    capped = plan.max_units is not None
    horizon = plan.max_units if capped else front + max_steps
    flags, clears = [], []
    while walker.n < horizon and walker.mass.shape[0]:
        c, f = walker.step()
        if capped and walker.n == horizon and walker.mass.shape[0]:
            c2, f2 = walker.cut()
            c, f = c + c2, f + f2
        clears.append(c)
        flags.append(f)
        if (not capped and walker.n % _CHECK_EVERY == 0
                and walker.mass.sum(axis=0).max() < residual_tol):
            break
    flag = np.array(flags).T if flags else np.zeros((R * W, 0))     # (R W, T)
    clear = np.array(clears).T if clears else np.zeros((R * W, 0))
    stop = flag + clear
    cdf = np.concatenate([np.zeros((R * W, 1)), np.cumsum(stop, axis=1)], axis=1)
    further = stop @ np.arange(1, stop.shape[1] + 1)
    residual = walker.mass.sum(axis=0) if walker.mass.shape[0] else np.zeros(R * W)
    return {"lo": probe.lo, "W": W, "p_flag": flag.sum(axis=1), "p_clear": clear.sum(axis=1),
            "further": further, "cdf": cdf, "residual": residual}


def _figures(plan: SprtPlan, n0: np.ndarray, d0: np.ndarray, p: np.ndarray, residual_tol: float,
             max_steps: int, keep: bool) -> tuple[dict, StopLaw | None]:
    """Figures of distinct open states: an early phase per state up to the front, then
    the common tail from the open points at the front."""
    R, S = p.size, n0.size
    base, front = int(n0.min()), int(n0.max())
    order = np.argsort(n0, kind="stable")
    entry_n = n0[order].tolist()
    n_rows = np.tile(n0, R)

    walker = _Walker(plan, base, np.repeat(p, S).reshape(1, R * S), R * S)
    done = 0

    def enter():
        nonlocal done
        stop = done
        while stop < S and entry_n[stop] == walker.n:
            stop += 1
        if stop > done:
            states = order[done:stop]
            cols = (np.arange(R)[:, None] * S + states[None, :]).reshape(-1)
            walker.mass[np.tile(d0[states], R) - walker.lo, cols] = 1.0
            done = stop

    enter()
    early = np.zeros((front - base + 1, R * S))     # stop mass at absolute n = base + t
    e_flag = np.zeros(R * S)
    while walker.n < front:
        c, f = walker.step()
        early[walker.n - base] = c + f
        e_flag += f
        enter()
    tail = _tail(plan, front, p, residual_tol, max_steps)
    W, lo_f = tail["W"], tail["lo"]
    # what is open at the front, per state and rate: (R, S, W)
    fm = walker.mass.T.reshape(R, S, -1)
    if walker.lo != lo_f or fm.shape[2] != W:
        raise AssertionError("front band mismatch")  # both come from the same plan numbers

    def mix(values):          # (R W,) tail figures -> (R S,) through the front masses
        return np.einsum("rsw,rw->rs", fm, values.reshape(R, W)).reshape(R * S)

    e_stop = early.sum(axis=0)
    e_units = early.T @ np.arange(base, front + 1)
    open_front = fm.sum(axis=2).reshape(R * S)
    tail_stop = tail["p_flag"] + tail["p_clear"]
    p_flag = e_flag + mix(tail["p_flag"])
    p_clear = e_stop - e_flag + mix(tail["p_clear"])
    units = e_units + mix(tail["further"] + front * tail_stop)
    further = units - (p_flag + p_clear) * n_rows
    residual = mix(tail["residual"])
    early_cdf = np.cumsum(early, axis=0)            # (front-base+1, R S)
    quantiles = {}
    for q in QUANTILES:
        at = np.full(R * S, -1, dtype=np.int64)
        reached = early_cdf >= q - 1e-12
        hit = reached[-1]
        at[hit] = base + np.argmax(reached[:, hit], axis=0) - n_rows[hit]
        rest = np.flatnonzero(~hit & (open_front > 0))
        if rest.size:
            at[rest] = _late_quantile(q, early_cdf[-1, rest], fm.reshape(R * S, W)[rest],
                                      rest // S, tail["cdf"].reshape(R, W, -1)) \
                + front - n_rows[rest]
            at[rest[at[rest] < front - n_rows[rest]]] = -1
        quantiles[q] = at.reshape(R, S)
    fig = {"p_flag": p_flag.reshape(R, S), "p_clear": p_clear.reshape(R, S),
           "further": further.reshape(R, S), "residual": residual.reshape(R, S),
           "quantiles": quantiles}
    law = None
    if keep:
        law = StopLaw(base=base, front=front, front_lo=lo_f,
                      early_cdf=early_cdf.T.reshape(R, S, -1), front_mass=fm,
                      late_cdf=tail["cdf"].reshape(R, W, -1))
    return fig, law


def _late_quantile(q: float, early_total: np.ndarray, front_mass: np.ndarray, rate: np.ndarray,
                   late_cdf: np.ndarray) -> np.ndarray:
    """Smallest t with early_total + front_mass . late_cdf[rate][:, t] >= q (-1 if never).

    The mixture is nondecreasing in t, so a vectorised bisection finds t with
    about log2(T) evaluations per state.
    """
    T = late_cdf.shape[2]
    W = front_mass.shape[1]
    cols = np.arange(W)[None, :]

    def value(t):
        return early_total + (front_mass * late_cdf[rate[:, None], cols, t[:, None]]).sum(axis=1)

    target = q - 1e-12
    lo = np.zeros(early_total.size, dtype=np.int64)
    hi = np.full(early_total.size, T - 1, dtype=np.int64)
    ever = value(hi) >= target
    while (lo < hi).any():
        mid = (lo + hi) // 2
        ok = value(mid) >= target
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid + 1)
    return np.where(ever, lo, -1)


# -- the register-level error target --------------------------------------------------
@dataclass(frozen=True)
class RegisterTarget:
    """Per-facility alpha for a register of ``size`` facilities.

    Attributes
    ----------
    size : int
        Facilities in the register, K.
    false_flags : float
        Target F: expected false flags over the register (Bonferroni), and
        when F < 1 also the chance of any false flag (Šidák).
    alpha_per_facility : float
        F / K: K facilities each flagged with probability F / K when
        compliant give F false flags in expectation (linearity of
        expectation; Bonferroni 1936 bounds the chance of any by the same F).
    alpha_sidak : float or None
        1 - (1 - F)**(1/K): with independent facilities the chance of any
        false flag is exactly F (Šidák 1967, JASA 62:626-633). None when F >= 1.
    """

    size: int
    false_flags: float
    alpha_per_facility: float
    alpha_sidak: float | None


def register_alpha(size: int, false_flags: float) -> RegisterTarget:
    """Per-facility alpha that keeps a register's false flags at ``false_flags``.

    Parameters
    ----------
    size : int
        K >= 1 facilities.
    false_flags : float
        0 < F < K.

    Raises
    ------
    ValueError
        For a size below 1 or F outside (0, K).
    """
    if isinstance(size, bool) or not isinstance(size, (int, np.integer)) or size < 1:
        raise ValueError(f"the register size must be a whole number of at least 1, got {size!r}")
    if isinstance(false_flags, bool) or not isinstance(false_flags, (int, float, np.floating)) \
            or not math.isfinite(false_flags) or not 0.0 < false_flags < size:
        raise ValueError(f"the register's false flags must lie strictly between 0 and the "
                         f"register size {size}, got {false_flags!r}")
    f = float(false_flags)
    sidak = -math.expm1(math.log1p(-f) / size) if f < 1.0 else None
    return RegisterTarget(size=int(size), false_flags=f, alpha_per_facility=f / size,
                          alpha_sidak=sidak)


__all__ = ["StateFigures", "conditioned", "RegisterTarget", "register_alpha", "QUANTILES",
           "MONITORING"]


def register_design(p0: float, p1: float, alpha: float, beta: float, size: int,
                    false_flags: float, **options):
    """The plan at the register's per-facility alpha, and how it compares with ``alpha``.

    Returns
    -------
    (DesignResult, dict)
        The design at ``alpha_per_facility`` (F / K, Bonferroni) with the same
        p0, p1, beta and ``options`` (cap, cut, calibration), and the JSON block
        ``{size, false_flags, alpha_per_facility, alpha_sidak, asn_p0_original,
        asn_p0_register}`` where the ASNs are the exact E[N] at p0 of the plan at
        ``alpha`` and at ``alpha_per_facility``.
    """
    from .design import design

    target = register_alpha(size, false_flags)
    original = design(p0, p1, alpha, beta, **options)
    registered = design(p0, p1, target.alpha_per_facility, beta, **options)
    info = {"size": target.size, "false_flags": target.false_flags,
            "alpha_per_facility": target.alpha_per_facility, "alpha_sidak": target.alpha_sidak,
            "asn_p0_original": float(original.exact.asn[0]),
            "asn_p0_register": float(registered.exact.asn[0]),
            "alpha_original": float(alpha),
            "exact_alpha_original": original.alpha_exact,
            "exact_alpha_register": registered.alpha_exact}
    return registered, info
