"""Imperfect re-checks: the apparent rate an auditor sees, and back to the true rate.

An auditor finds a truly nonconforming unit with sensitivity Se and calls a
conforming one conforming with specificity Sp. A unit is then *recorded* as
nonconforming with probability

    p* = Se p + (1 - Sp) (1 - p),

the apparent rate. For Se + Sp > 1 this is an increasing affine map of the true
rate p, and its inverse is the Rogan-Gladen estimator

    p = (p* + Sp - 1) / (Se + Sp - 1).

A sequential test on the recorded outcomes is a test on the apparent rate: its
operating characteristic at the true rate p is the ordinary one at p*(p). So a
plan for true rates p0, p1 is the ordinary plan for p0*, p1*, and every figure
shown for a true rate p is read off at p*(p).

References
----------
.. [1] W. J. Rogan and B. Gladen, "Estimating prevalence from the results of a
       screening test", American Journal of Epidemiology 107 (1978), 71-76.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .sprt import PlanInputError


def _check_unit(name: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating)) \
            or not math.isfinite(value):
        raise PlanInputError(name, f"{name} must be a finite number, got {value!r}")
    if not 0.0 < value <= 1.0:
        raise PlanInputError(name, f"{name} must lie in (0, 1], got {value}")
    return float(value)


@dataclass(frozen=True)
class Recheck:
    """Sensitivity and specificity of the re-check.

    Raises
    ------
    PlanInputError
        For values outside (0, 1] or Se + Sp <= 1 (then a recorded
        nonconforming unit says nothing, or the opposite, about the true rate).
    """

    sensitivity: float = 1.0
    specificity: float = 1.0

    def __post_init__(self):
        se = _check_unit("sensitivity", self.sensitivity)
        sp = _check_unit("specificity", self.specificity)
        if se + sp <= 1.0:
            raise PlanInputError(
                "specificity", f"sensitivity + specificity must exceed 1, got {se} + {sp} = "
                f"{se + sp:g}: such a re-check carries no information about the true rate")
        object.__setattr__(self, "sensitivity", se)
        object.__setattr__(self, "specificity", sp)

    @property
    def perfect(self) -> bool:
        return self.sensitivity == 1.0 and self.specificity == 1.0

    @property
    def youden(self) -> float:
        """Se + Sp - 1, the slope of the map from the true to the apparent rate."""
        return self.sensitivity + self.specificity - 1.0

    def apparent(self, p):
        """p* = Se p + (1 - Sp)(1 - p) (Rogan and Gladen 1978), for scalars or arrays."""
        p = np.asarray(p, dtype=float)
        out = self.sensitivity * p + (1.0 - self.specificity) * (1.0 - p)
        return float(out) if out.ndim == 0 else out

    def true_rate(self, p_apparent, clip: bool = True):
        """Rogan-Gladen estimate (p* + Sp - 1) / (Se + Sp - 1), clipped to [0, 1] if asked."""
        q = np.asarray(p_apparent, dtype=float)
        out = (q + self.specificity - 1.0) / self.youden
        if clip:
            out = np.clip(out, 0.0, 1.0)
        return float(out) if out.ndim == 0 else out

    def true_interval(self, low: float, high: float) -> tuple[float, float, bool]:
        """An interval for the apparent rate mapped to the true rate (the map is increasing),
        clipped to [0, 1]; the flag says whether clipping changed an end."""
        lo, hi = self.true_rate(low, clip=False), self.true_rate(high, clip=False)
        clipped = lo < 0.0 or hi > 1.0 or lo > 1.0 or hi < 0.0
        return float(min(max(lo, 0.0), 1.0)), float(min(max(hi, 0.0), 1.0)), bool(clipped)

    @property
    def apparent_range(self) -> tuple[float, float]:
        """Apparent rates of true rates 0 and 1: 1 - Sp and Se."""
        return 1.0 - self.specificity, self.sensitivity
