"""The document id of a case file: SHA-256 of its canonical JSON, printed on every PDF page
so that a printout can be matched to its JSON.

Canonical JSON here: the case file as its JSON answer carries it (validated through
``CaseFilePublic``), less the two fields that cannot take part — ``document_id`` itself and
``generated_at`` (so the same cycle gives the same id whenever it is printed) — written with
sorted keys, no spaces (separators ``,`` and ``:``), non-ASCII characters as themselves, and
encoded as UTF-8. Anyone can recompute it from the JSON::

    body = {k: v for k, v in casefile.items() if k not in ("document_id", "generated_at")}
    hashlib.sha256(json.dumps(body, sort_keys=True, separators=(",", ":"),
                              ensure_ascii=False).encode("utf-8")).hexdigest()
"""
from __future__ import annotations

import hashlib
import json

LEFT_OUT = ("document_id", "generated_at")


def canonical_json(casefile: dict) -> bytes:
    from ..schemas import CaseFilePublic
    shown = CaseFilePublic.model_validate({**casefile, "document_id": ""}).model_dump(
        mode="json")
    body = {k: v for k, v in shown.items() if k not in LEFT_OUT}
    return json.dumps(body, sort_keys=True, separators=(",", ":"),
                      ensure_ascii=False).encode("utf-8")


def document_id(casefile: dict) -> str:
    return hashlib.sha256(canonical_json(casefile)).hexdigest()


def with_document_id(casefile: dict) -> dict:
    """The case file with its software version and document id added."""
    from ..version import software_version
    out = {**casefile, "software_version": software_version()}
    out["document_id"] = document_id(out)
    return out
