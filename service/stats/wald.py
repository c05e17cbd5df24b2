"""Wald's approximations to the OC and ASN of a Bernoulli SPRT.

With A = e**a and B = e**b, the OC (probability of clearing) at the rate p(h) is

    p(h) = (1 - ((1-p1)/(1-p0))**h) / ((p1/p0)**h - ((1-p1)/(1-p0))**h),
    L(h) = (A**h - 1) / (A**h - B**h),

and the average sample number is E[N] = (L b + (1-L) a) / E[z], with
E[z] = p ln(p1/p0) - (1-p) ln((1-p0)/(1-p1)); where E[z] = 0 (h = 0, p = s)
it is -a b / E[z**2]. These neglect the overshoot of the boundaries, which is
why the exact engine is the reference and these are shown beside it.

References
----------
.. [1] A. Wald, "Sequential Analysis", Wiley, 1947, sections 3.3 and 5.2-5.3
       (OC and ASN of the sequential binomial test).
.. [2] NIST/SEMATECH e-Handbook of Statistical Methods, section 6.2.6.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .sprt import SprtPlan


@dataclass(frozen=True)
class WaldFigures:
    """Wald's approximate risks and ASN for a plan's boundaries (cap ignored)."""

    alpha: float
    beta: float
    asn_p0: float
    asn_p1: float
    asn_at_s: float


def error_rates(plan: SprtPlan) -> tuple[float, float]:
    """Wald's alpha and beta for the boundaries in use.

    From A = (1-beta)/alpha and B = beta/(1-alpha):
    alpha = (1-B)/(A-B), beta = B (A-1)/(A-B); for Wald's own boundaries this
    returns the nominal alpha and beta.
    """
    A, B = math.exp(plan.upper_llr), math.exp(plan.lower_llr)
    return (1.0 - B) / (A - B), B * (A - 1.0) / (A - B)


def _rate_at_h(plan: SprtPlan, h: np.ndarray) -> np.ndarray:
    """p(h), written so that no power overflows for large |h|."""
    l1, l2 = math.log(plan.p1 / plan.p0), math.log((1.0 - plan.p1) / (1.0 - plan.p0))
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        pos = np.expm1(h * l2) * np.exp(-h * l1) / np.expm1(h * (l2 - l1))  # h > 0
        neg = np.expm1(-h * l2) / np.expm1(h * (l1 - l2))                    # h < 0
    return np.where(h > 0, pos, np.where(h < 0, neg, plan.s))


def _clear_at_h(plan: SprtPlan, h: np.ndarray) -> np.ndarray:
    """L(h) = (A**h - 1) / (A**h - B**h), written so that no power overflows."""
    a, b = plan.upper_llr, plan.lower_llr
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        pos = np.expm1(-h * a) / np.expm1(h * (b - a))                       # h > 0
        neg = np.exp(-h * b) * np.expm1(h * a) / np.expm1(h * (a - b))       # h < 0
    return np.where(h > 0, pos, np.where(h < 0, neg, a / (a - b)))


def oc_at_h(plan: SprtPlan, h: float) -> tuple[float, float]:
    """(p(h), L(h)): Wald's parametric OC point; L is the chance of clearing."""
    h = np.asarray([h], dtype=float)
    return float(_rate_at_h(plan, h)[0]), float(_clear_at_h(plan, h)[0])


def p_clear_at(plan: SprtPlan, p) -> np.ndarray:
    """Wald's approximate probability of clearing at each rate in ``p``.

    Solves p(h) = p by bisection on h, all rates at once (p(h) falls from 1 to
    0 as h runs over the reals), then evaluates L(h).
    """
    p = np.atleast_1d(np.asarray(p, dtype=float))
    l1, l2 = math.log(plan.p1 / plan.p0), -math.log((1.0 - plan.p1) / (1.0 - plan.p0))
    span = 745.0 / min(l1, l2)  # beyond this p(h) is 0 or 1 in double precision
    lo, hi = np.full(p.shape, -span), np.full(p.shape, span)
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        above = _rate_at_h(plan, mid) > p      # p(mid) too high: the root lies at larger h
        lo, hi = np.where(above, mid, lo), np.where(above, hi, mid)
    L = _clear_at_h(plan, 0.5 * (lo + hi))
    L = np.where(np.abs(p - plan.s) < 1e-12, plan.upper_llr / (plan.upper_llr - plan.lower_llr), L)
    return np.clip(np.where(p <= 0.0, 1.0, np.where(p >= 1.0, 0.0, L)), 0.0, 1.0)


def asn_at(plan: SprtPlan, p) -> np.ndarray:
    """Wald's approximate E[N] at each rate in ``p``: (L b + (1-L) a) / E[z]."""
    p = np.atleast_1d(np.asarray(p, dtype=float))
    a, b, g1, g2 = plan.upper_llr, plan.lower_llr, plan.g1, plan.g2
    ez = p * g1 - (1.0 - p) * g2
    L = p_clear_at(plan, p)
    at_s = np.abs(ez) < 1e-12
    with np.errstate(divide="ignore", invalid="ignore"):
        general = (L * b + (1.0 - L) * a) / ez
        # where E[z] = 0: E[N] = -a b / E[z**2] (Wald 1947, eq. 5.40)
        zero_drift = -a * b / ((g1 + g2) ** 2 * p * (1.0 - p))
    return np.where(at_s, zero_drift, general)


def wald_curve(plan: SprtPlan, p) -> tuple[np.ndarray, np.ndarray]:
    """Wald's approximate (P(flag), ASN) at each rate in ``p``."""
    return 1.0 - p_clear_at(plan, p), asn_at(plan, p)


def approximate(plan: SprtPlan) -> WaldFigures:
    """Wald's figures for the boundaries in use."""
    alpha, beta = error_rates(plan)
    asn0, asn1, asn_s = asn_at(plan, [plan.p0, plan.p1, plan.s]).tolist()
    return WaldFigures(alpha=alpha, beta=beta, asn_p0=asn0, asn_p1=asn1, asn_at_s=asn_s)
