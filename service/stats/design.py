"""One entry point for a plan: boundaries, exact figures, Wald's figures, the
fixed-sample test it replaces, the OC/ASN curve, figures at chosen rates and
the warnings a planner must see first.

A plan may look at its boundaries after every ``visit_units`` units (the
records come in visits) and may allow for imperfect re-checks (sensitivity,
specificity): the test then runs on the apparent rates of
:mod:`service.stats.recheck`, and every figure is reported for the *true* rate.

Every caller (CLI, service, dashboard, benchmarks) goes through :func:`design`
so the numbers shown anywhere are the same numbers.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import minimize_scalar

from . import wald
from .calibrate import Calibration, calibrate as _calibrate
from .exact import MAX_STEPS, ExactResult, ExactSummary, PathCounts
from .fixed_sample import FixedSamplePlan, fixed_sample_plan
from .recheck import Recheck
from .sprt import PlanInputError, SprtPlan, check_rates

#: Points on the OC/ASN curve from p = 0 to 2 p1 (p0, p1 and s are added).
CURVE_POINTS = 41
#: Looks shown one by one in the acceptance/rejection table.
TABLE_UNITS = 40
QUANTILES = (0.5, 0.9, 0.99)
#: The cap suggested for an untruncated plan: three times the single-sampling n
#: (rule of thumb of the NIST/SEMATECH e-Handbook, section 6.2.6).
CAP_FACTOR = 3


#: A plan's own figures are incomplete when more than this is still open at p0 or p1.
INCOMPLETE_TOL = 1e-9
#: Exact risks above the target by more than this (relative) raise a warning.
RISK_RTOL = 1e-9


def plan_warnings(plan: SprtPlan, alpha_x: float, beta_x: float,
                  own_residual: float) -> list[dict]:
    """Warnings ``[{code, message}]`` a planner must read before any figure.

    ``incomplete``: the probability still open at p0 or p1 when the computation
    stopped exceeds 1e-9, so alpha', beta' and the expected units are partial
    sums. ``alpha_above_target`` / ``beta_above_target``: an exact risk exceeds
    its target by more than 1e-9 relative.
    """
    out = []
    if own_residual > INCOMPLETE_TOL:
        out.append({"code": "incomplete", "message": (
            f"The computation stopped at its unit limit with {own_residual:.2g} of the "
            "probability still open at p0 or p1: the risks and expected units below are "
            "partial sums, not exact figures, quantiles not reached are left out, and no "
            "saving over the fixed-sample test is claimed. Add a cap (max_units) or move p1 "
            "further from p0.")})
    hint = ("raise the cap or drop it" if plan.max_units is not None
            else "calibrate the boundaries or check the visit size")
    if alpha_x > plan.alpha * (1.0 + RISK_RTOL):
        out.append({"code": "alpha_above_target", "message": (
            f"The exact risk of flagging a facility at p0 is {alpha_x:.4g}, above the "
            f"target alpha = {plan.alpha:g}; {hint}.")})
    if beta_x > plan.beta * (1.0 + RISK_RTOL):
        out.append({"code": "beta_above_target", "message": (
            f"The exact risk of clearing a facility at p1 is {beta_x:.4g}, above the "
            f"target beta = {plan.beta:g}; {hint}.")})
    return out


def _opt(value, cast=float):
    return None if value is None else cast(value)


def _first_look(plan: SprtPlan, estimate: float, ok) -> int | None:
    """Smallest look (multiple of visit_units, or the cap) at which ``ok(n)`` holds.

    ``ok`` is monotone in n; ``estimate`` is where it first holds for unit looks,
    checked in a small window around it so that rounding cannot shift the answer.
    """
    k, cap = plan.visit_units, plan.max_units
    if not np.isfinite(estimate) or estimate > 4e18:
        start = None
    else:
        base = max(1, int(np.floor(estimate)) - 2)
        ns = np.arange(base, base + 6)
        hit = ns[ok(ns)]
        start = int(hit[0]) if hit.size else None
        if start is not None and base > 1 and ok(np.array([base - 1]))[0]:
            start = int(base - 1)
    if start is not None:
        look = -(-start // k) * k
        if cap is None or look < cap:
            return look
    return None


@dataclass(frozen=True)
class DesignResult:
    """Everything known about one plan. ``to_dict()`` is the JSON contract.

    ``plan`` runs on the apparent rates (equal to the true ones when the
    re-check is perfect); ``true_p0``, ``true_p1`` are the rates the planner
    asked for and every figure is reported against the true rate.
    """

    plan: SprtPlan
    calibrated: bool
    wald_plan: SprtPlan
    exact: ExactResult = field(repr=False)        # rows: p0, p1, then the chosen rates
    curve: ExactSummary = field(repr=False)       # at the curve's apparent rates
    curve_true: np.ndarray = field(default=None, repr=False)   # the curve's true rates
    asn_max: float = 0.0
    p_at_asn_max: float = 0.0
    residual: float = 0.0
    wald: wald.WaldFigures | None = None
    wald_curve_flag: np.ndarray = field(default=None, repr=False)
    wald_curve_asn: np.ndarray = field(default=None, repr=False)
    fixed: FixedSamplePlan | None = None
    recheck: Recheck = field(default_factory=Recheck)
    true_p0: float = 0.0
    true_p1: float = 0.0
    rates: tuple = ()
    uncorrected: tuple[float, float] | None = None
    calibration: Calibration | None = field(default=None, repr=False)
    first_flag_units: int | None = None
    first_clear_units: int | None = None

    @property
    def alpha_exact(self) -> float:
        return float(self.exact.p_flag[0])

    @property
    def beta_exact(self) -> float:
        return float(self.exact.p_clear[1])

    @property
    def own_residual(self) -> float:
        """Probability still open at p0 or p1 when the computation stopped."""
        return float(self.exact.residual[:2].max())

    @property
    def warnings(self) -> list[dict]:
        return plan_warnings(self.plan, self.alpha_exact, self.beta_exact, self.own_residual)

    @property
    def complete(self) -> bool:
        return not any(w["code"] == "incomplete" for w in self.warnings)

    @property
    def suggested_max_units(self) -> int | None:
        if self.fixed is None or self.fixed.exact_n is None:
            return None
        return CAP_FACTOR * self.fixed.exact_n

    def decision_numbers(self, units: int = TABLE_UNITS) -> list[dict]:
        """Clear-if-d<= and flag-if-d>= numbers at the plan's looks.

        Every look among the first ``units``; after those only the looks where a
        number changes, up to the first look at which a clear is possible (so the
        table always shows it), or up to the cap, where the cut rule decides.
        """
        plan = self.plan
        k, cap = plan.visit_units, plan.max_units
        last = max(units * k, self.first_clear_units or 0, self.first_flag_units or 0)
        if cap is not None:
            last = cap
        n = np.arange(k, last + 1, k, dtype=np.int64)
        if cap is not None and (n.size == 0 or n[-1] != cap) and cap <= last:
            n = np.append(n, cap)
        acc = plan.acceptance_numbers(n)
        rej = plan.rejection_numbers(n)
        if cap is not None and n.size and n[-1] == cap:
            acc_c, rej_c = plan.cap_numbers(np.array([cap]))
            acc[-1], rej[-1] = acc_c[0], rej_c[0]
        keep = np.ones(n.size, dtype=bool)
        if n.size > units:
            changed = np.r_[True, (acc[1:] != acc[:-1]) | (rej[1:] != rej[:-1])]
            keep[units:] = changed[units:]
            keep[-1] = True
        rows = []
        for i in np.flatnonzero(keep).tolist():
            m = int(n[i])
            rows.append({"n": m,
                         "accept": int(acc[i]) if acc[i] >= 0 else None,
                         "reject": int(rej[i]) if rej[i] <= m else None,
                         "at_cap": bool(cap is not None and m == cap)})
        return rows

    def quantiles(self, row: int) -> dict:
        """Units by which 50, 90, 99 % of cycles have decided (None where not reached)."""
        out = {}
        for q in QUANTILES:
            v = int(self.exact.quantile(q)[row])
            out[f"q{round(q * 100)}"] = None if v < 0 else v
        return out

    def _at_rates(self) -> list[dict]:
        rows = []
        asn, ex = self.exact.asn, self.exact
        for i, p in enumerate(self.rates, start=2):
            q = self.quantiles(i)
            open_mass = float(ex.residual[i])
            rows.append({"p": float(p), "apparent_p": float(ex.p[i]),
                         "p_flag": float(ex.p_flag[i]), "p_clear": float(ex.p_clear[i]),
                         "asn": float(asn[i]), "units_q50": q["q50"], "units_q90": q["q90"],
                         "units_q99": q["q99"], "residual": open_mass,
                         "complete": open_mass <= INCOMPLETE_TOL})
        return rows

    def to_dict(self) -> dict:
        pl, wp = self.plan, self.wald_plan
        fx = self.fixed
        asn0, asn1 = (float(x) for x in self.exact.asn[:2])
        sd0, sd1 = (float(x) for x in self.exact.sd[:2])
        warns = self.warnings
        claims = not warns      # a saving is claimed only for a complete plan on target

        def saving(asn):
            if fx.exact_n is None or not claims:
                return None
            return 1.0 - asn / fx.exact_n

        rc = self.recheck
        unc = self.uncorrected or (self.alpha_exact, self.beta_exact)
        cal = self.calibration
        return {
            "plan": {"p0": self.true_p0, "p1": self.true_p1, "alpha": pl.alpha, "beta": pl.beta,
                     "max_units": pl.max_units, "cut_llr": pl.cut_llr,
                     "calibrated": self.calibrated, "visit_units": pl.visit_units,
                     "sensitivity": rc.sensitivity, "specificity": rc.specificity},
            "warnings": warns,
            "boundaries": {"upper_llr": pl.upper_llr, "lower_llr": pl.lower_llr,
                           "h1": pl.h1, "h2": pl.h2, "s": pl.s,
                           "g1": pl.g1, "g2": pl.g2,
                           "wald_upper_llr": wp.upper_llr, "wald_lower_llr": wp.lower_llr},
            "exact": {"alpha": self.alpha_exact, "beta": self.beta_exact,
                      "asn_p0": asn0, "asn_p1": asn1,
                      "asn_max": self.asn_max, "p_at_asn_max": self.p_at_asn_max,
                      "sd_p0": sd0, "sd_p1": sd1,
                      "units_p0": self.quantiles(0), "units_p1": self.quantiles(1),
                      "first_flag_units": self.first_flag_units,
                      "first_clear_units": self.first_clear_units,
                      "residual": self.residual, "residual_p0_p1": self.own_residual,
                      "complete": not any(w["code"] == "incomplete" for w in warns)},
            "recheck": {"sensitivity": rc.sensitivity, "specificity": rc.specificity,
                        "apparent_p0": pl.p0, "apparent_p1": pl.p1,
                        "uncorrected_alpha": float(unc[0]), "uncorrected_beta": float(unc[1])},
            "calibration": None if cal is None else {
                "wald_alpha": cal.wald_alpha, "wald_beta": cal.wald_beta,
                "wald_asn_p0": cal.wald_asn_p0, "wald_asn_p1": cal.wald_asn_p1,
                "asn_p0": cal.asn_p0, "asn_p1": cal.asn_p1,
                "compared_with_wald": cal.compared_with_wald, "reason": cal.reason},
            "wald": {"alpha": self.wald.alpha, "beta": self.wald.beta,
                     "asn_p0": self.wald.asn_p0, "asn_p1": self.wald.asn_p1,
                     "asn_at_s": self.wald.asn_at_s},
            "fixed_sample": {"exact_n": fx.exact_n, "critical_count": fx.critical_count,
                             "alpha": fx.alpha, "power": fx.power, "normal_n": fx.normal_n,
                             "saving_p0": saving(asn0), "saving_p1": saving(asn1),
                             "suggested_max_units": self.suggested_max_units},
            "decision_numbers": self.decision_numbers(),
            "at_rates": self._at_rates(),
            "curve": [{"p": float(pt), "apparent_p": float(p), "p_flag": float(f),
                       "p_clear": float(c), "asn": float(a), "residual": float(r),
                       "complete": bool(r <= INCOMPLETE_TOL),
                       "wald_p_flag": float(wf),
                       "wald_asn": None if not np.isfinite(wa) else float(wa)}
                      for pt, p, f, c, a, r, wf, wa in zip(
                          self.curve_true, self.curve.p, self.curve.p_flag, self.curve.p_clear,
                          self.curve.asn, self.curve.residual, self.wald_curve_flag,
                          self.wald_curve_asn)],
        }


def curve_rates(plan: SprtPlan, points: int = CURVE_POINTS,
                recheck: Recheck | None = None, p0: float | None = None,
                p1: float | None = None) -> np.ndarray:
    """True rates of the curve: 0 to 2 p1 (at most 1), with p0, p1 and s added."""
    rc = recheck or Recheck()
    p0 = plan.p0 if p0 is None else p0
    p1 = plan.p1 if p1 is None else p1
    top = min(1.0, 2.0 * p1)
    grid = np.linspace(0.0, top, points)
    s_true = rc.true_rate(plan.s, clip=False)
    extra = [p0, p1] + ([s_true] if 0.0 <= s_true <= 1.0 else [])
    return np.unique(np.concatenate([grid, extra]))


def _asn_peak(counts: PathCounts, grid: np.ndarray, asn: np.ndarray) -> tuple[float, float]:
    """Maximise the exact E[N] over p: best grid point, then a bounded scalar search
    (Brent's method, scipy.optimize.minimize_scalar) between its neighbours."""
    best = int(np.argmax(asn))
    p_best, asn_best = float(grid[best]), float(asn[best])
    lo = float(grid[max(best - 1, 0)])
    hi = float(grid[min(best + 1, grid.size - 1)])
    if hi > lo:
        found = minimize_scalar(lambda x: -float(counts.summary([x]).asn[0]), bounds=(lo, hi),
                                method="bounded", options={"xatol": 1e-10})
        if -found.fun > asn_best:
            p_best, asn_best = float(found.x), float(-found.fun)
    return asn_best, p_best


def _check_chosen_rates(rates) -> tuple:
    out = []
    for p in rates or ():
        if isinstance(p, bool) or not isinstance(p, (int, float, np.floating)) \
                or not np.isfinite(p) or not 0.0 <= p <= 1.0:
            raise PlanInputError("rate", f"a chosen rate must lie in [0, 1], got {p!r}")
        out.append(float(p))
    return tuple(out)


def design(p0: float, p1: float, alpha: float, beta: float, max_units: int | None = None,
           cut_llr: float = 0.0, calibrate: bool = False,
           curve_points: int = CURVE_POINTS, visit_units: int = 1,
           sensitivity: float = 1.0, specificity: float = 1.0, rates=(),
           max_steps: int = MAX_STEPS) -> DesignResult:
    """Design a Bernoulli SPRT and compute its exact figures.

    Parameters
    ----------
    p0, p1 : float
        Tolerated true rate and true rate worth acting on, 0 < p0 < p1 < 1.
    alpha, beta : float
        Risks of flagging at p0 and of clearing at p1, alpha + beta < 1.
    max_units : int, optional
        Cap N; an open cycle is decided at N units by the cut rule.
    cut_llr : float
        At the cap, flag iff LLR >= cut_llr (any finite value).
    calibrate : bool
        Replace Wald's boundaries by ones whose exact risks meet alpha and beta
        (see :mod:`service.stats.calibrate`).
    curve_points : int
        Points on the OC/ASN curve between 0 and 2 p1 (at least 41 are kept).
    visit_units : int
        K: the boundaries are looked at after every K units (one visit), and at
        the cap. K = 1 is a look after every unit.
    sensitivity, specificity : float
        Of the re-check (Rogan and Gladen 1978); the test runs on the apparent
        rates p* = Se p + (1 - Sp)(1 - p).
    rates : sequence of float
        True rates at which to report P(flag), P(clear), E[N] and quantiles.
    max_steps : int
        Unit limit of the exact engine for an untruncated plan.

    Raises
    ------
    PlanInputError
        For rates, risks or options out of range, naming the argument.
    ValueError
        If calibration finds no boundaries meeting alpha and beta.
    """
    check_rates(p0, p1, alpha, beta, max_units, cut_llr, visit_units)
    rc = Recheck(sensitivity, specificity)
    chosen = _check_chosen_rates(rates)
    ap0, ap1 = rc.apparent(p0), rc.apparent(p1)
    wald_plan = SprtPlan.wald(ap0, ap1, alpha, beta, max_units=max_units, cut_llr=cut_llr,
                              visit_units=visit_units)
    cal = _calibrate(wald_plan, max_steps=max_steps) if calibrate else None
    plan = cal.plan if cal is not None else wald_plan
    uncorrected = None
    if not rc.perfect:
        # what the same procedure built on the uncorrected rates really gives
        naive = SprtPlan.wald(p0, p1, alpha, beta, max_units=max_units, cut_llr=cut_llr,
                              visit_units=visit_units)
        if calibrate:
            naive = _calibrate(naive, max_steps=max_steps).plan
        res = PathCounts(naive, max_steps=max_steps).summary([ap0, ap1])
        uncorrected = (float(res.p_flag[0]), float(res.p_clear[1]))
    return design_plan(plan, calibrated=cal is not None, curve_points=curve_points,
                       recheck=rc, true_p0=float(p0), true_p1=float(p1), rates=chosen,
                       uncorrected=uncorrected, calibration=cal, max_steps=max_steps)


def design_plan(plan: SprtPlan, calibrated: bool = False,
                curve_points: int = CURVE_POINTS, recheck: Recheck | None = None,
                true_p0: float | None = None, true_p1: float | None = None, rates=(),
                uncorrected: tuple[float, float] | None = None,
                calibration: Calibration | None = None,
                max_steps: int = MAX_STEPS) -> DesignResult:
    """The figures of a plan whose boundaries are already fixed (e.g. a stored snapshot).

    ``plan`` is on the apparent scale; ``recheck`` maps true rates to it.
    """
    rc = recheck or Recheck()
    chosen = _check_chosen_rates(rates)
    p0 = rc.true_rate(plan.p0) if true_p0 is None else float(true_p0)
    p1 = rc.true_rate(plan.p1) if true_p1 is None else float(true_p1)
    wald_plan = SprtPlan.wald(plan.p0, plan.p1, plan.alpha, plan.beta,
                              max_units=plan.max_units, cut_llr=plan.cut_llr,
                              visit_units=plan.visit_units)
    counts = PathCounts(plan, max_steps=max_steps)
    grid_true = curve_rates(plan, max(int(curve_points), CURVE_POINTS), rc, p0, p1)
    grid = rc.apparent(grid_true)
    # The curve first, so that the recursion runs as far as its slowest rate needs.
    curve = counts.summary(grid)
    exact = counts.evaluate([plan.p0, plan.p1, *rc.apparent(np.array(chosen, dtype=float))])
    asn_max, p_at = _asn_peak(counts, grid, curve.asn)
    residual = float(max(curve.residual.max(), exact.residual.max()))
    wf, wa = wald.wald_curve(plan, grid)
    first_flag = _first_look(plan, plan.upper_llr / plan.g1,
                             lambda n: plan.rejection_numbers(n) <= n)
    first_clear = _first_look(plan, -plan.lower_llr / plan.g2,
                              lambda n: plan.acceptance_numbers(n) >= 0)
    if plan.max_units is not None:
        acc_c, rej_c = plan.cap_numbers(np.array([plan.max_units]))
        if first_flag is None and rej_c[0] <= plan.max_units:
            first_flag = plan.max_units
        if first_clear is None and acc_c[0] >= 0:
            first_clear = plan.max_units
    return DesignResult(plan=plan, calibrated=calibrated, wald_plan=wald_plan, exact=exact,
                        curve=curve, curve_true=grid_true, asn_max=asn_max,
                        p_at_asn_max=float(rc.true_rate(p_at)), residual=residual,
                        wald=wald.approximate(plan), wald_curve_flag=wf, wald_curve_asn=wa,
                        fixed=fixed_sample_plan(plan.p0, plan.p1, plan.alpha, plan.beta),
                        recheck=rc, true_p0=p0, true_p1=p1, rates=chosen,
                        uncorrected=uncorrected, calibration=calibration,
                        first_flag_units=first_flag, first_clear_units=first_clear)
