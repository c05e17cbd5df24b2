"""Exact operating characteristic and sample-number distribution of a Bernoulli SPRT.

Every path of n units with d nonconforming has probability p**d (1-p)**(n-d),
whatever its order, and whether a path is still open depends on the path only.
So the number of paths K(n, d) that first reach a boundary at (n, d) does not
depend on the true rate, and for any rate p

    P(stop at (n, d) | p) = K(n, d) p**d (1-p)**(n-d).

K is built once per plan by the usual forward recursion over the open band of
the (n, d) lattice (in linear scale tilted to the driftless rate s with a
running log scale, so counts of any size are exact to rounding; stop points are
kept in logarithms), and then every rate is evaluated at once, vectorised over
p. Plans looked at after every unit with a small s are advanced column by
column: along a count d the recursion is a cumulative sum of the column below. An
untruncated plan is followed until the mass still open is below 1e-12 for every
rate asked for; a capped plan decides what is open at N by the cut rule.

References
----------
.. [1] A. Wald, "Sequential Analysis", Wiley, 1947, appendix A.2 (exact OC and
       ASN of a binomial test by counting paths that have not yet stopped).
.. [2] C. Jennison and B. W. Turnbull, "Group Sequential Methods with
       Applications to Clinical Trials", Chapman & Hall/CRC, 2000, ch. 19
       (recursive computation of exit probabilities).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import xlog1py, xlogy

from .sprt import SprtPlan

#: Untruncated plans run until the open mass is below this for every rate.
RESIDUAL_TOL = 1e-12
#: Safety stop for plans whose open mass decays too slowly; the residual
#: left at that point is reported, never hidden.
MAX_STEPS = 4_000_000
_BLOCK = 4096
_CHUNK_CELLS = 4_000_000   # rates x stop points evaluated at once (32 MB of float64)
_CHECK_EVERY = 64
#: plans with s at most this (looked at after every unit) advance by column sweeps
_COLUMN_S = 0.25
_COLUMN_BLOCK = 65536
#: open mass below this makes later stop points of that rate negligible (far below 1e-12 even
#: when weighted by the units, which never exceed MAX_STEPS)
_NEGLIGIBLE = 1e-24


def _log_weight(n, d, p):
    """log(p**d (1-p)**(n-d)) for lattice points (n, d: shape M) and rates p (shape P): (P, M).

    Inner rates use a plain outer product; the rows p = 0 and p = 1 go through
    xlogy so that 0 * log 0 counts as 0.
    """
    p = np.asarray(p, dtype=float).reshape(-1, 1)
    n = np.asarray(n)
    d = np.asarray(d)
    inner = (p[:, 0] > 0.0) & (p[:, 0] < 1.0)
    if inner.all():
        return np.log(p) * d + np.log1p(-p) * (n - d)
    out = np.empty((p.shape[0], np.broadcast(n, d).size))
    pi = p[inner]
    out[inner] = np.log(pi) * d + np.log1p(-pi) * (n - d)
    out[~inner] = xlogy(d, p[~inner]) + xlog1py(n - d, -p[~inner])
    return out


class PathCounts:
    """Log-counts of the paths that first stop at each lattice point of a plan.

    The boundaries are looked at after every ``plan.visit_units`` units (and at
    the cap, the last look); between looks nothing stops. The recursion can be
    continued: :meth:`evaluate` advances it until the rates it is asked about
    have less than ``residual_tol`` still open.

    Internally the open counts are held in linear scale, tilted to the rate s
    at which the test's walk has no drift: w(n, d) = K(n, d) r**d t**n / C with
    r = s / (1 - s), t = min(1, 1/r) and a running scalar C (kept in logs). The
    step is then w(n, d) = c0 w(n-1, d) + c1 w(n-1, d-1) with c0, c1 <= 1 (the
    probability recursion at rate s up to a constant), so one unit costs two
    vector operations and the counts inside the band stay within float range.
    """

    def __init__(self, plan: SprtPlan, max_steps: int = MAX_STEPS, first_looks=None):
        self.plan = plan
        self.visit = int(getattr(plan, "visit_units", 1) or 1)
        # optional unit counts of the first looks (e.g. the records that really came);
        # after the last of them the looks come every visit_units units again
        self._first = np.unique(np.asarray(first_looks if first_looks is not None else [],
                                           dtype=np.int64))
        self._after = int(self._first[-1]) if self._first.size else 0
        self.horizon = plan.max_units if plan.max_units is not None else max_steps
        self.n = 0
        self.lo = self.hi = 0            # open d range at self.n
        ratio = plan.s / (1.0 - plan.s)
        self._log_r = math.log(ratio)
        self._log_t = 0.0 if ratio <= 1.0 else -self._log_r
        self._c0, self._c1 = (1.0, ratio) if ratio <= 1.0 else (1.0 / ratio, 1.0)
        self._open = np.ones(1)          # w at (0, 0): one path
        self._scale = 0.0                # log C
        self._chunks = {True: [], False: []}   # flag?: list of (n, d, logk) arrays
        self._joined = {}
        self._quiet: dict[float, int] = {}   # rate -> first n seen with open mass negligible
        self.finished = False

    def _to_log(self, n, d, w, scale) -> np.ndarray:
        with np.errstate(divide="ignore"):
            return np.log(w) + scale - d * self._log_r - n * self._log_t

    @property
    def open_logk(self) -> tuple[np.ndarray, np.ndarray]:
        """(d, log K) of the points still open at ``self.n``."""
        if self.finished or self.hi < self.lo:
            return np.zeros(0, dtype=np.int64), np.zeros(0)
        d = np.arange(self.lo, self.hi + 1)
        return d, self._to_log(self.n, d, self._open, self._scale)

    def residual(self, p) -> np.ndarray:
        """Probability still open at ``self.n`` for each rate in ``p``."""
        p = np.atleast_1d(np.asarray(p, dtype=float))
        d, logk = self.open_logk
        if d.size == 0:
            return np.zeros(p.size)
        return _sum_exp(logk + _log_weight(self.n, d, p))

    def _add_points(self, flag: bool, n, d, logk) -> None:
        keep = logk > -np.inf
        if keep.any():
            self._chunks[flag].append((n[keep], d[keep], logk[keep]))
            self._joined.pop(flag, None)

    def looks(self, ns: np.ndarray) -> np.ndarray:
        """Whether the boundaries are looked at after each unit count in ``ns``."""
        look = (ns % self.visit == 0) if self.visit > 1 else np.ones(ns.size, dtype=bool)
        if self._first.size:
            later = ns > self._after
            look = np.where(later, (ns - self._after) % self.visit == 0,
                            np.isin(ns, self._first))
        if self.plan.max_units is not None:
            look |= ns == self.plan.max_units
        return look

    def _advance_block(self, p_check, residual_tol) -> None:
        plan, n0, visit = self.plan, self.n, self.visit
        m = min(_BLOCK, self.horizon - n0)
        if self._first.size and n0 < self._after:   # the gap between given looks
            gaps = np.diff(np.r_[0, self._first])
            visit = max(visit, int(gaps.max()))
        width = self.hi - self.lo + 1 + min(visit, m) + 2
        band = math.ceil((plan.upper_llr - plan.lower_llr) / (plan.g1 + plan.g2)) + 3
        cols = max(width, band + min(visit, m) + 2)
        m = max(1, min(m, _CHUNK_CELLS // (2 * cols)))
        ns = np.arange(n0 + 1, n0 + m + 1)
        acc = (plan.acceptance_numbers(ns) + 1).tolist()    # lowest d still open
        rej = (plan.rejection_numbers(ns) - 1).tolist()     # highest d still open
        look = self.looks(ns).tolist()
        hist = np.zeros((m, cols))      # row i: w at n0+i+1 for d from row_lo[i]
        row_lo, row_w, row_scale, keep_lo, keep_hi = [], [], [], [], []
        c0, c1 = self._c0, self._c1
        src, lo, hi, scale = self._open, self.lo, self.hi, self._scale
        check = p_check is not None
        used = m
        for i in range(m):
            w = hi - lo + 1
            dst = hist[i]
            # K(n, d) = K(n-1, d) + K(n-1, d-1) over d in [lo, hi + 1], tilted
            if c0 == 1.0:
                dst[:w] = src
                dst[1:w + 1] += src * c1
            else:
                np.multiply(src, c0, out=dst[:w])
                dst[1:w + 1] += src
            row_lo.append(lo)
            row_w.append(w + 1)
            row_scale.append(scale)
            if look[i]:
                nl, nh = max(lo, acc[i]), min(hi + 1, rej[i])
            else:
                nl, nh = lo, hi + 1
            keep_lo.append(nl)
            keep_hi.append(nh)
            if nh < nl:
                self.finished = True
                used = i + 1
                lo, hi = nl, nh
                break
            src = dst[nl - lo:nh - lo + 1]
            lo, hi = nl, nh
            if (n0 + i + 1) % _CHECK_EVERY == 0:
                top = float(src.max())
                if top > 0.0:
                    src = src / top
                    scale += math.log(top)
                if check:
                    n_now = n0 + i + 1
                    d_now = np.arange(lo, hi + 1)
                    logk = self._to_log(n_now, d_now, src, scale)
                    if _sum_exp(logk + _log_weight(n_now, d_now, p_check)).max() < residual_tol:
                        used = i + 1
                        break
        # Everything that left the band during the block, found in one pass.
        hist = hist[:used]
        row_lo, row_w = np.array(row_lo, dtype=np.int64), np.array(row_w, dtype=np.int64)
        keep_lo, keep_hi = np.array(keep_lo), np.array(keep_hi)
        row_scale = np.array(row_scale)
        d_grid = row_lo[:, None] + np.arange(cols)
        n_grid = np.broadcast_to(ns[:used, None], d_grid.shape)
        s_grid = np.broadcast_to(row_scale[:, None], d_grid.shape)
        filled = np.arange(cols) < row_w[:, None]
        for flag, mask in ((False, filled & (d_grid < keep_lo[:, None])),
                           (True, filled & (d_grid > keep_hi[:, None]))):
            nn, dd = n_grid[mask], d_grid[mask]
            self._add_points(flag, nn, dd, self._to_log(nn, dd, hist[mask], s_grid[mask]))
        self._open = src.copy() if hi >= lo else np.zeros(0)
        self._scale = scale
        self.lo, self.hi, self.n = lo, hi, n0 + used
        if self.n == self.horizon and plan.max_units is not None and not self.finished:
            self._decide_at_cap()

    def _columns_usable(self) -> bool:
        """Column sweeps serve plans looked at after every unit whose tilt c0 is 1 (s <= 1/2)
        and whose band is crossed slowly (small s): there they replace one vector step per
        unit by one cumulative sum per count d."""
        return self.visit == 1 and not self._first.size and self._c0 == 1.0 \
            and self.plan.s <= _COLUMN_S

    def _advance_columns(self, p_check, residual_tol) -> None:
        """Advance a block of units column by column.

        Looked at after every unit, the band's ends lo(n), hi(n) never fall and rise by at most
        one a unit, so a count d is open on one run of n. Along that run the tilted counts obey
        w(n, d) = w(n-1, d) + r w(n-1, d-1): a cumulative sum of the column d-1 below it. Points
        reached off the run are where paths stop (flag above the band, clear below it).
        """
        plan, n0 = self.plan, self.n
        r = self._c1
        band = max(self.hi - self.lo + 1,
                   math.ceil((plan.upper_llr - plan.lower_llr) / (plan.g1 + plan.g2)) + 2)
        m = int(min(_COLUMN_BLOCK, self.horizon - n0,
                    max(1024, 2 * band / max(plan.s, 1e-12)),
                    max(64, 300.0 / math.log1p(r))))
        ns = np.arange(n0 + 1, n0 + m + 1)
        lo_n = np.maximum(plan.acceptance_numbers(ns) + 1, 0)
        hi_n = np.minimum(plan.rejection_numbers(ns) - 1, ns)
        start = np.r_[self._open, 0.0] if self.hi >= self.lo else np.zeros(1)
        d_first, d_last = self.lo, int(max(hi_n.max(initial=0), self.hi)) + 1
        below = np.zeros(m)          # open values of column d-1 over the block
        below0 = 0.0                 # column d-1 at n0
        end_vals = []
        chunks_n, chunks_d, chunks_v, chunks_f = [], [], [], []
        for d in range(d_first, d_last + 1):
            x = np.empty(m)
            x[0] = below0
            x[1:] = below[:-1]
            x *= r
            carry = float(start[d - self.lo]) if self.lo <= d <= self.hi else 0.0
            open_ = (lo_n <= d) & (hi_n >= d)
            idx = np.flatnonzero(open_)
            v = x
            if carry:
                v[0] += carry
            col = np.zeros(m)
            if idx.size:
                a, b = int(idx[0]), int(idx[-1])
                seg = np.cumsum(v[a:b + 1])
                col[a:b + 1] = seg
                v = v.copy()
                v[a:b + 1] = 0.0
                if b + 1 < m:
                    v[b + 1] += seg[-1]
            hit = np.flatnonzero(v > 0.0)
            if hit.size:
                chunks_n.append(ns[hit])
                chunks_d.append(np.full(hit.size, d))
                chunks_v.append(v[hit])
                chunks_f.append(d > hi_n[hit])
            end_vals.append(col[-1])
            below, below0 = col, carry if (self.lo <= d <= self.hi) else 0.0
        scale = self._scale
        if chunks_n:
            nn, dd = np.concatenate(chunks_n), np.concatenate(chunks_d)
            vv, ff = np.concatenate(chunks_v), np.concatenate(chunks_f)
            logk = self._to_log(nn, dd, vv, scale)
            self._add_points(True, nn[ff], dd[ff], logk[ff])
            self._add_points(False, nn[~ff], dd[~ff], logk[~ff])
        lo, hi = int(lo_n[-1]), int(hi_n[-1])
        self.n = n0 + m
        if hi >= lo:
            vals = np.array(end_vals)[lo - d_first:hi - d_first + 1]
            top = float(vals.max())
            if top > 0.0:
                vals = vals / top
                scale += math.log(top)
            self._open, self.lo, self.hi, self._scale = vals, lo, hi, scale
        else:
            self._open, self.lo, self.hi = np.zeros(0), lo, hi
            self.finished = True
        if self.n == self.horizon and plan.max_units is not None and not self.finished:
            self._decide_at_cap()

    def _decide_at_cap(self) -> None:
        """Split what is open at the cap N: flag iff LLR(N, d) >= cut_llr."""
        d, logk = self.open_logk
        flag = d >= int(self.plan.cut_numbers(self.n))
        n = np.full(d.size, self.n, dtype=np.int64)
        self._add_points(False, n[~flag], d[~flag], logk[~flag])
        self._add_points(True, n[flag], d[flag], logk[flag])
        self.finished = True

    def advance_until(self, p, residual_tol: float = RESIDUAL_TOL) -> None:
        """Continue the recursion until every rate in ``p`` has < ``residual_tol`` open."""
        p = np.atleast_1d(np.asarray(p, dtype=float))
        capped = self.plan.max_units is not None
        step = self._advance_columns if self._columns_usable() else self._advance_block
        while not self.finished and self.n < self.horizon:
            if not capped:
                open_mass = self.residual(p)
                for rate, mass in zip(p.tolist(), open_mass.tolist()):
                    if mass < _NEGLIGIBLE:
                        self._quiet.setdefault(rate, self.n)
                if open_mass.max() < residual_tol:
                    return
            step(None if capped else p, residual_tol)

    def points(self, flag: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(n, d, log K) of every point where paths stop flagged (or cleared), in n order."""
        if flag not in self._joined:
            chunks = self._chunks[flag]
            if chunks:
                n, d, k = (np.concatenate(c) for c in zip(*chunks))
                order = np.argsort(n, kind="stable")   # column sweeps add points d by d
                self._joined[flag] = (n[order], d[order], k[order])
            else:
                self._joined[flag] = (np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64),
                                      np.zeros(0))
        return self._joined[flag]

    def _mass(self, flag: bool, p: np.ndarray):
        ns, ds, ks = self.points(flag)
        return ns, np.exp(ks + _log_weight(ns, ds, p))

    def _totals(self, flag: bool, p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(sum of P, sum of n P) over the stop points, in chunks so memory stays bounded."""
        ns, ds, ks = self.points(flag)
        prob, units = np.zeros(p.size), np.zeros(p.size)
        # a rate whose open mass fell below _NEGLIGIBLE at some n gets nothing measurable
        # from the stop points after it: they are skipped for that rate
        quiet = np.array([self._quiet.get(x, np.inf) for x in p.tolist()])
        step = max(1, _CHUNK_CELLS // max(p.size, 1))
        for a in range(0, ns.size, step):
            rows = np.flatnonzero(quiet >= ns[a])
            if rows.size == 0:
                break
            mass = np.exp(ks[a:a + step] + _log_weight(ns[a:a + step], ds[a:a + step], p[rows]))
            prob[rows] += mass.sum(axis=1)
            units[rows] += mass @ ns[a:a + step]
        return prob, units

    def summary(self, p, residual_tol: float = RESIDUAL_TOL) -> "ExactSummary":
        """P(flag), P(clear), E[N] and residual at each rate, without per-n arrays."""
        p = _rates(p)
        self.advance_until(p, residual_tol)
        pf, nf = self._totals(True, p)
        pc, nc = self._totals(False, p)
        return ExactSummary(p=p, p_flag=pf, p_clear=pc, asn=nf + nc, residual=self.residual(p))

    def evaluate(self, p, residual_tol: float = RESIDUAL_TOL) -> "ExactResult":
        """Exact figures of the plan at every rate in ``p`` (vectorised over p)."""
        p = _rates(p)
        self.advance_until(p, residual_tol)
        width = self.n + 1
        by_n = {}
        for flag in (True, False):
            ns, mass = self._mass(flag, p)
            out = np.zeros((p.size, width))
            if ns.size:
                starts = np.flatnonzero(np.r_[True, ns[1:] != ns[:-1]])
                out[:, ns[starts]] = np.add.reduceat(mass, starts, axis=1)
            by_n[flag] = out
        return ExactResult(p=p, p_flag=by_n[True].sum(axis=1), p_clear=by_n[False].sum(axis=1),
                           residual=self.residual(p), flag_by_n=by_n[True], clear_by_n=by_n[False])


def _rates(p) -> np.ndarray:
    p = np.atleast_1d(np.asarray(p, dtype=float))
    if np.any(~np.isfinite(p)) or np.any((p < 0) | (p > 1)):
        raise ValueError("rates must lie in [0, 1]")
    return p


def _sum_exp(lw: np.ndarray) -> np.ndarray:
    """sum(exp(lw), axis=1) without overflow (rows may be all -inf)."""
    top = lw.max(axis=1, keepdims=True)
    top = np.where(np.isfinite(top), top, 0.0)
    return np.exp(top[:, 0]) * np.exp(lw - top).sum(axis=1)


@dataclass(frozen=True)
class ExactSummary:
    """P(flag), P(clear), E[N] and the open residual at each rate in ``p``."""

    p: np.ndarray
    p_flag: np.ndarray
    p_clear: np.ndarray
    asn: np.ndarray
    residual: np.ndarray


@dataclass(frozen=True)
class ExactResult:
    """Exact figures of one plan at each rate in ``p``.

    Attributes
    ----------
    p : ndarray, shape (P,)
    p_flag, p_clear : ndarray, shape (P,)
        Probability that the plan ends flagged / cleared.
    residual : ndarray, shape (P,)
        Mass still open when the computation stopped (0 for capped plans).
    flag_by_n, clear_by_n : ndarray, shape (P, n_max + 1)
        Probability of ending flagged / cleared at exactly n units (column n).
    """

    p: np.ndarray
    p_flag: np.ndarray
    p_clear: np.ndarray
    residual: np.ndarray
    flag_by_n: np.ndarray
    clear_by_n: np.ndarray

    def subset(self, rows) -> "ExactResult":
        """The figures for a slice or index array of the rates."""
        return ExactResult(p=self.p[rows], p_flag=self.p_flag[rows], p_clear=self.p_clear[rows],
                           residual=self.residual[rows], flag_by_n=self.flag_by_n[rows],
                           clear_by_n=self.clear_by_n[rows])

    @property
    def stop_by_n(self) -> np.ndarray:
        return self.flag_by_n + self.clear_by_n

    @property
    def asn(self) -> np.ndarray:
        """Expected number of units to a decision, E[N]."""
        n = np.arange(self.stop_by_n.shape[1])
        return self.stop_by_n @ n

    @property
    def sd(self) -> np.ndarray:
        """Standard deviation of the number of units to a decision."""
        n = np.arange(self.stop_by_n.shape[1], dtype=float)
        second = self.stop_by_n @ (n * n)
        return np.sqrt(np.maximum(second - self.asn ** 2, 0.0))

    def quantile(self, q: float) -> np.ndarray:
        """Smallest n with P(N <= n) >= q, per rate (-1 where not reached)."""
        cdf = np.cumsum(self.stop_by_n, axis=1)
        reached = cdf >= q - 1e-12
        first = np.argmax(reached, axis=1)
        return np.where(reached.any(axis=1), first, -1)


def run_exact(plan: SprtPlan, p, residual_tol: float = RESIDUAL_TOL,
              max_steps: int = MAX_STEPS) -> ExactResult:
    """Exact exit probabilities of ``plan`` at each true rate in ``p``.

    Parameters
    ----------
    plan : SprtPlan
    p : array_like of float in [0, 1]
    residual_tol : float
        Untruncated plans stop once every rate's open mass is below this.
    max_steps : int
        Hard limit on units for untruncated plans; whatever is still open
        then is returned as ``residual``.
    """
    return PathCounts(plan, max_steps=max_steps).evaluate(p, residual_tol)
