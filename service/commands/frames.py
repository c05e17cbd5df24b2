"""seqaudit frames import: register a frame (the units a facility passed in a period) from a
file: one unit ref per line, or CSV with a unit_ref column."""
from __future__ import annotations

from pathlib import Path

from pydantic import ValidationError

from ..operations import Monitor, validation_errors
from ..sampling import Sampling
from ..sampling_schemas import FramePeriod
from ..selection import SelectionInputError, frame_from_text


class FrameImportError(ValueError):
    """The command line or the file cannot be used; ``option`` names the argument."""

    def __init__(self, option: str, message: str):
        super().__init__(message)
        self.option = option


def import_frame(monitor: Monitor, path: str, facility_id: str, label: str,
                 period_start: str, period_end: str) -> int:
    """Register the frame in ``path`` for ``facility_id`` and print what was stored."""
    try:
        period = FramePeriod(label=label, period_start=period_start, period_end=period_end)
    except ValidationError as exc:
        err = validation_errors(exc)[0]
        option = {"body": "period-end"}.get(err["field"], err["field"].replace("_", "-"))
        raise FrameImportError(option, err["message"]) from None
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise FrameImportError("file", f"{path}: {exc}") from None
    try:
        frame = frame_from_text(text)
    except SelectionInputError as exc:
        raise FrameImportError("file", f"{path}: {exc}") from None
    out = Sampling(monitor).register_frame(facility_id, period.label, period.period_start,
                                           period.period_end, frame,
                                           (f"import:{Path(path).name}", "analyst"))
    print(f"frame {out['frame_id']} of {facility_id}: {out['size']} units, "
          f"sha256 {out['sha256']}")
    if frame.duplicates:
        shown = ", ".join(frame.duplicates[:10])
        more = f" and {len(frame.duplicates) - 10} more" if len(frame.duplicates) > 10 else ""
        print(f"duplicates counted once: {len(frame.duplicates)} ({shown}{more})")
    return 0
