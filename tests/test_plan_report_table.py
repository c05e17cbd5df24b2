"""The text report's table of decision numbers says which looks it shows, and shows them."""
import re

import pytest

from service.plan_report import render
from service.stats import design
from service.stats.design import TABLE_UNITS


def _table(text: str) -> tuple[str, list[int]]:
    head, _, rest = text.partition("Decision numbers at the looks")
    lines = rest.splitlines()
    units = []
    for line in lines[2:]:
        m = re.match(r"\s+(\d+)\s", line)
        if not m:
            break
        units.append(int(m.group(1)))
    return lines[0], units


@pytest.mark.parametrize("kwargs", [
    dict(p0=0.01, p1=0.10, alpha=0.05, beta=0.10),                   # decides within 40
    dict(p0=0.002, p1=0.004, alpha=0.05, beta=0.10),                 # changes far later
    dict(p0=0.01, p1=0.10, alpha=0.05, beta=0.10, max_units=60),     # a cap
    dict(p0=0.01, p1=0.10, alpha=0.05, beta=0.10, visit_units=5),    # looks every 5 units
    dict(p0=0.01, p1=0.10, alpha=0.05, beta=0.10, max_units=1000),   # many changes to the cap
])
def test_the_header_names_the_rows_the_table_holds(kwargs):
    result = design(**kwargs)
    rows = result.decision_numbers()
    header, units = _table(render(result))
    looks = [r["n"] for r in rows]
    first = looks[:TABLE_UNITS]
    assert units[:len(first)] == first            # every one of the first looks, in order
    assert f"every look up to {first[-1]} units" in header
    later = looks[TABLE_UNITS:]
    if not later:
        assert units == first and "then" not in header
    elif len(later) <= 20:
        assert units == looks                      # and then each change, none left out
        assert f"then the looks where a number changes up to {later[-1]} units" in header
    else:
        assert f"all {len(later)} later rows are in the JSON output" in header
        assert units[-1] == looks[-1]
