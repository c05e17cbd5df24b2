"""The plan workbench's form: every wrong field named at once, in words, before the engine
runs (the engine itself stops at the first bad argument)."""
from __future__ import annotations

import math

RATES = ("p0", "p1", "alpha", "beta")


def read_plan_form(form: dict) -> tuple[dict | None, dict[str, str]]:
    """(design() arguments or None, {field: message} for each wrong field)."""
    errors: dict[str, str] = {}
    values: dict = {}
    for name in RATES:
        text = str(form.get(name, "")).strip()
        try:
            value = float(text)
        except ValueError:
            errors[name] = f"must be a number such as 0.05, got {text!r}" if text \
                else "is required, e.g. 0.05"
            continue
        if not math.isfinite(value) or not 0.0 < value < 1.0:
            errors[name] = f"must lie strictly between 0 and 1, got {text}"
            continue
        values[name] = value
    if "p0" in values and "p1" in values and values["p0"] >= values["p1"]:
        errors["p1"] = f"must be larger than p0 ({values['p0']:g}), got {values['p1']:g}"
    if "alpha" in values and "beta" in values and values["alpha"] + values["beta"] >= 1.0:
        errors["beta"] = (f"alpha + beta must be below 1, got {values['alpha']:g} + "
                          f"{values['beta']:g}")
    cap_text = str(form.get("max_units", "")).strip()
    cap = None
    if cap_text:
        try:
            cap = int(cap_text)
        except ValueError:
            errors["max_units"] = f"must be a whole number of units, or empty for none; got " \
                                  f"{cap_text!r}"
        else:
            if cap < 1:
                errors["max_units"] = f"must be at least 1 unit, got {cap}"
    if errors:
        return None, errors
    return {**values, "max_units": cap, "calibrate": bool(form.get("calibrate"))}, {}


def summary(errors: dict[str, str]) -> str:
    """One sentence naming each wrong field, in the form's order."""
    order = [*RATES, "max_units"]
    label = {"max_units": "cap"}
    parts = [f"{label.get(k, k)} {errors[k]}" for k in order if k in errors]
    return "Please correct: " + "; ".join(parts) + "."
