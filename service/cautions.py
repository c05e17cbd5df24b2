"""The caution every output that shows a decision carries (README, reports,
case files, dashboard): a crossing is a signal for review, not a verdict."""

SIGNAL_NOT_VERDICT = (
    "A boundary crossing is a statistical signal for review under the agency's own "
    "procedures, not a verdict on the facility.")

ASSUMPTIONS = (
    "audited units are selected at random from the units the facility passed",
    "outcomes of different units are independent",
    "the facility's rate of nonconforming passes is stable over the monitoring cycle",
)


def caution_lines() -> list[str]:
    return [SIGNAL_NOT_VERDICT, "The test assumes that:"] + [f"  - {a}" for a in ASSUMPTIONS]
