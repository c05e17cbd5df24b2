"""The case file's draw section as PDF flowables (reportlab; user text escaped)."""
from __future__ import annotations

from reportlab.lib.units import mm

from .pdf import BODY, H2, SMALL, _grid, _p, _t


def draws_story(section: dict | None) -> list:
    if section is None:
        return []
    story = [_p("How the re-checked units were chosen", H2),
             _p(_t(section["statement"])
                + (" The plan requires drawn units: a record of a unit not drawn is kept but is "
                   "not evidence." if section["require_draw"] else ""), BODY)]
    if section["records_not_counted_for_lack_of_draw"]:
        story.append(_p(f"{section['records_not_counted_for_lack_of_draw']} record(s) were "
                        "kept but not counted because their unit was not drawn.", BODY))
    if not section["draws"]:
        story.append(_p("No draw was made for this cycle.", BODY))
    for d in section["draws"]:
        f = d["frame"]
        story += [
            _p(f"<b>Draw {d['draw_id']}</b> made {_t(d['made_at'])} by {_t(d['made_by'])}: "
               f"{d['size']} of {f['size']} units of frame {f['frame_id']} "
               f"'{_t(f['label'])}' ({_t(f['period_start'])} to {_t(f['period_end'])}); "
               f"{d['rechecked']} re-checked.", BODY),
            _p(f"Frame SHA-256: <font face='Courier'>{_t(f['sha256'])}</font>", SMALL),
            _p(f"Seed: <font face='Courier'>{_t(d['seed'])}</font>", SMALL),
            _p(f"Key string (RFC 3797): <font face='Courier'>{_t(d['key'])}</font>", SMALL)]
        rows = [["order", "frame position", "unit ref", "re-checked by record"]]
        rows += [[str(u["order"]), str(u["frame_position"]), _p(_t(u["unit_ref"]), SMALL),
                  _p(_t(u["record_id"]) if u["record_id"] else "not re-checked", SMALL)]
                 for u in d["units"]]
        story.append(_grid(rows, [14 * mm, 24 * mm, 70 * mm, 70 * mm]))
        story.append(_p("Recompute it:", SMALL))
        story += [_p(f"<font face='Courier'>{_t(c)}</font>", SMALL) for c in d["commands"]]
    return story
