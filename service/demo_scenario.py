"""The invented demo scenario: Harlow Vale District Weights and Measures re-checks fuel
dispensers and shop scales certified by registered service agencies. All names are invented."""
from __future__ import annotations

import numpy as np

OFFICE = "Harlow Vale District Weights and Measures"
_FIRST = ["Brackenridge", "Copperfield", "Dunmore", "Elmstead", "Fennick", "Glasswell",
          "Hollin", "Ivybrook", "Juniper", "Kestrel", "Larkspur", "Merrow", "Northgate",
          "Oakhanger", "Pennyfold"]
_SECOND = ["Metrology Services", "Scale & Pump Co.", "Calibration Works", "Measures Ltd",
           "Instrument Care"]


def agencies(count: int = 30, seed: int = 20261201) -> list[dict]:
    """Invented service agencies (half dispensers, half scales, some scales on the capped
    plan), each with a hidden true rate.

    Most certify well (rate near p0); a few are lax (near or above p1), so the
    demo shows both flags and early clears.
    """
    rng = np.random.default_rng(seed)
    out = []
    for i in range(count):
        plan = "dispensers" if i % 2 == 0 else ("scales_capped" if i % 4 == 3 else "scales")
        p0, p1 = (0.02, 0.08) if plan == "dispensers" else (0.04, 0.12)  # as in the config
        kind = rng.choice(["good", "good", "good", "middling", "lax"])
        rate = {"good": p0 * rng.uniform(0.3, 1.0), "middling": (p0 + p1) / 2,
                "lax": p1 * rng.uniform(1.0, 1.6)}[kind]
        name = f"{_FIRST[i % len(_FIRST)]} {_SECOND[(i // len(_FIRST) + i) % len(_SECOND)]}"
        out.append({"facility_id": f"SA-{101 + i}", "name": name, "plan": plan,
                    "true_rate": float(rate)})
    # One dispensers agency was spotless before the demo (so its history clears it and the
    # watch chart starts) and drifts upward once the demo runs: a watch signal follows within
    # a few minutes (the chart's limit, 62 with weight 23, is reached after about 9 of its
    # units on average at this rate: exact ARL 9.5 by the Markov chain, tests/test_demo_watch.py).
    out[DRIFTING]["history_rate"] = 0.0
    out[DRIFTING]["drift_rate"] = 0.35
    return out


#: Index of the agency that drifts upward after its clear.
DRIFTING = 0


INSPECTORS = ["R. Okafor", "M. Lindqvist", "T. Haddad", "S. Moreau", "J. Abernethy"]
