"""The plan workbench's form: text fields to design() arguments, errors in words."""
from __future__ import annotations

from ..stats import PlanInputError, design

LABELS = {"p0": "p0", "p1": "p1", "alpha": "alpha", "beta": "beta", "max_units": "the cap",
          "cut_llr": "the cut LLR", "visit_units": "units per visit",
          "sensitivity": "sensitivity", "specificity": "specificity", "rate": "a chosen rate"}


def _number(form: dict, key: str) -> float:
    try:
        return float(str(form[key]).strip())
    except ValueError:
        raise PlanInputError(key, f"{LABELS[key]} must be a number, got {form[key]!r}") from None


def _whole(form: dict, key: str, default: int | None) -> int | None:
    text = str(form.get(key, "")).strip()
    if not text:
        return default
    try:
        return int(text)
    except ValueError:
        raise PlanInputError(key, f"{LABELS[key]} must be a whole number of units, got "
                             f"{text!r}") from None


def parse(form: dict) -> dict:
    """design() keyword arguments from the form's text (PlanInputError naming the field)."""
    args = {k: _number(form, k) for k in ("p0", "p1", "alpha", "beta")}
    args["max_units"] = _whole(form, "max_units", None)
    args["visit_units"] = _whole(form, "visit_units", 1)
    for key in ("sensitivity", "specificity", "cut_llr"):
        args[key] = _number(form, key) if str(form.get(key, "")).strip() else (
            0.0 if key == "cut_llr" else 1.0)
    rates = [t for t in str(form.get("rate", "")).replace(";", ",").split(",") if t.strip()]
    if len(rates) > 20:
        raise PlanInputError("rate", "at most 20 chosen rates")
    args["rates"] = tuple(_number({"rate": t}, "rate") for t in rates)
    args["calibrate"] = bool(form.get("calibrate"))
    return args


def compute_plan(form: dict) -> tuple[dict | None, str | None, dict | None]:
    """(result dict, None, register block or None) or (None, error text, None).

    With the register fields filled in, the plan is designed at the register's per-facility
    alpha (:func:`service.stats.register.register_design`) with the same other options.
    """
    try:
        args = parse(form)
        size, flags = (str(form.get(k, "")).strip()
                       for k in ("register_size", "register_false_flags"))
        if size or flags:
            from ..stats.register import register_design
            try:
                size_n = int(size)
            except ValueError:
                raise ValueError("The register size must be a whole number of "
                                 "facilities.") from None
            try:
                flags_f = float(flags)
            except ValueError:
                raise ValueError("The false flags allowed must be a number, e.g. 2 or "
                                 "0.5.") from None
            core = {k: args.pop(k) for k in ("p0", "p1", "alpha", "beta")}
            res, register = register_design(core["p0"], core["p1"], core["alpha"],
                                            core["beta"], size_n, flags_f, **args)
            return res.to_dict(), None, register
        return design(**args).to_dict(), None, None
    except PlanInputError as exc:
        return None, f"{exc.argument}: {exc}", None
    except ValueError as exc:
        return None, str(exc), None
