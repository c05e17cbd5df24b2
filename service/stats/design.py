"""One entry point for a plan: boundaries, exact figures, Wald's figures, the
fixed-sample test it replaces, and the OC/ASN curve.

Every caller (CLI, service, dashboard, benchmarks) goes through :func:`design`
so the numbers shown anywhere are the same numbers.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import minimize_scalar

from . import wald
from .calibrate import calibrate as _calibrate
from .exact import ExactResult, ExactSummary, PathCounts
from .fixed_sample import FixedSamplePlan, fixed_sample_plan
from .sprt import SprtPlan

#: Points on the OC/ASN curve from p = 0 to 2 p1 (p0, p1 and s are added).
CURVE_POINTS = 41
#: Rows of the acceptance/rejection table.
TABLE_UNITS = 40
QUANTILES = (0.5, 0.9, 0.99)
#: The cap suggested for an untruncated plan: three times the single-sampling n
#: (rule of thumb of the NIST/SEMATECH e-Handbook, section 6.2.6).
CAP_FACTOR = 3


@dataclass(frozen=True)
class DesignResult:
    """Everything known about one plan. ``to_dict()`` is the JSON contract."""

    plan: SprtPlan
    calibrated: bool
    wald_plan: SprtPlan
    exact: ExactResult = field(repr=False)        # at p0, p1 (rows 0, 1)
    curve: ExactSummary = field(repr=False)       # at the curve's rates
    asn_max: float = 0.0
    p_at_asn_max: float = 0.0
    residual: float = 0.0
    wald: wald.WaldFigures | None = None
    wald_curve_flag: np.ndarray = field(default=None, repr=False)
    wald_curve_asn: np.ndarray = field(default=None, repr=False)
    fixed: FixedSamplePlan | None = None

    @property
    def alpha_exact(self) -> float:
        return float(self.exact.p_flag[0])

    @property
    def beta_exact(self) -> float:
        return float(self.exact.p_clear[1])

    @property
    def suggested_max_units(self) -> int | None:
        if self.fixed is None or self.fixed.exact_n is None:
            return None
        return CAP_FACTOR * self.fixed.exact_n

    def decision_numbers(self, units: int = TABLE_UNITS) -> list[dict]:
        """Acceptance and rejection numbers for n = 1..units (None where impossible)."""
        n = np.arange(1, units + 1)
        acc = self.plan.acceptance_numbers(n)
        rej = self.plan.rejection_numbers(n)
        rows = []
        for i, k in enumerate(n.tolist()):
            if self.plan.max_units is not None and k > self.plan.max_units:
                break
            rows.append({"n": k,
                         "accept": int(acc[i]) if acc[i] >= 0 else None,
                         "reject": int(rej[i]) if rej[i] <= k else None})
        return rows

    def quantiles(self, row: int) -> dict:
        return {f"q{round(q * 100)}": int(self.exact.quantile(q)[row]) for q in QUANTILES}

    def to_dict(self) -> dict:
        pl, wp = self.plan, self.wald_plan
        fx = self.fixed
        asn0, asn1 = (float(x) for x in self.exact.asn)
        sd0, sd1 = (float(x) for x in self.exact.sd)

        def saving(asn):
            if fx.exact_n is None:
                return None
            return 1.0 - asn / fx.exact_n

        return {
            "plan": {"p0": pl.p0, "p1": pl.p1, "alpha": pl.alpha, "beta": pl.beta,
                     "max_units": pl.max_units, "cut_llr": pl.cut_llr,
                     "calibrated": self.calibrated},
            "boundaries": {"upper_llr": pl.upper_llr, "lower_llr": pl.lower_llr,
                           "h1": pl.h1, "h2": pl.h2, "s": pl.s,
                           "g1": pl.g1, "g2": pl.g2,
                           "wald_upper_llr": wp.upper_llr, "wald_lower_llr": wp.lower_llr},
            "exact": {"alpha": self.alpha_exact, "beta": self.beta_exact,
                      "asn_p0": asn0, "asn_p1": asn1,
                      "asn_max": self.asn_max, "p_at_asn_max": self.p_at_asn_max,
                      "sd_p0": sd0, "sd_p1": sd1,
                      "units_p0": self.quantiles(0), "units_p1": self.quantiles(1),
                      "residual": self.residual},
            "wald": {"alpha": self.wald.alpha, "beta": self.wald.beta,
                     "asn_p0": self.wald.asn_p0, "asn_p1": self.wald.asn_p1,
                     "asn_at_s": self.wald.asn_at_s},
            "fixed_sample": {"exact_n": fx.exact_n, "critical_count": fx.critical_count,
                             "alpha": fx.alpha, "power": fx.power, "normal_n": fx.normal_n,
                             "saving_p0": saving(asn0), "saving_p1": saving(asn1),
                             "suggested_max_units": self.suggested_max_units},
            "decision_numbers": self.decision_numbers(),
            "curve": [{"p": float(p), "p_flag": float(f), "p_clear": float(c), "asn": float(a),
                       "wald_p_flag": float(wf),
                       "wald_asn": None if not np.isfinite(wa) else float(wa)}
                      for p, f, c, a, wf, wa in zip(self.curve.p, self.curve.p_flag,
                                                    self.curve.p_clear, self.curve.asn,
                                                    self.wald_curve_flag, self.wald_curve_asn)],
        }


def curve_rates(plan: SprtPlan, points: int = CURVE_POINTS) -> np.ndarray:
    top = min(1.0, 2.0 * plan.p1)
    grid = np.linspace(0.0, top, points)
    return np.unique(np.concatenate([grid, [plan.p0, plan.p1, plan.s]]))


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


def design(p0: float, p1: float, alpha: float, beta: float, max_units: int | None = None,
           cut_llr: float = 0.0, calibrate: bool = False,
           curve_points: int = CURVE_POINTS) -> DesignResult:
    """Design a Bernoulli SPRT and compute its exact figures.

    Parameters
    ----------
    p0, p1 : float
        Tolerated rate and rate worth acting on, 0 < p0 < p1 < 1.
    alpha, beta : float
        Risks of flagging at p0 and of clearing at p1, alpha + beta < 1.
    max_units : int, optional
        Cap N; an open cycle is decided at N units by the cut rule.
    cut_llr : float
        At the cap, flag iff LLR >= cut_llr.
    calibrate : bool
        Replace Wald's boundaries by ones whose exact risks meet alpha and beta
        with a shorter plan (see :mod:`service.stats.calibrate`).
    curve_points : int
        Points on the OC/ASN curve between 0 and 2 p1 (at least 41 are kept).

    Raises
    ------
    ValueError
        For rates or risks out of range, naming the argument.
    """
    wald_plan = SprtPlan.wald(p0, p1, alpha, beta, max_units=max_units, cut_llr=cut_llr)
    plan = _calibrate(wald_plan).plan if calibrate else wald_plan
    return design_plan(plan, calibrated=bool(calibrate), curve_points=curve_points)


def design_plan(plan: SprtPlan, calibrated: bool = False,
                curve_points: int = CURVE_POINTS) -> DesignResult:
    """The figures of a plan whose boundaries are already fixed (e.g. a stored snapshot)."""
    p0, p1, alpha, beta = plan.p0, plan.p1, plan.alpha, plan.beta
    wald_plan = SprtPlan.wald(p0, p1, alpha, beta, max_units=plan.max_units,
                              cut_llr=plan.cut_llr)
    counts = PathCounts(plan)
    grid = curve_rates(plan, max(int(curve_points), CURVE_POINTS))
    # The curve first, so that the recursion runs as far as its slowest rate needs.
    curve = counts.summary(grid)
    exact = counts.evaluate([plan.p0, plan.p1])
    asn_max, p_at = _asn_peak(counts, grid, curve.asn)
    residual = float(max(curve.residual.max(), exact.residual.max()))
    wf, wa = wald.wald_curve(plan, grid)
    return DesignResult(plan=plan, calibrated=calibrated, wald_plan=wald_plan, exact=exact,
                        curve=curve, asn_max=asn_max, p_at_asn_max=p_at, residual=residual,
                        wald=wald.approximate(plan), wald_curve_flag=wf, wald_curve_asn=wa,
                        fixed=fixed_sample_plan(p0, p1, alpha, beta))
