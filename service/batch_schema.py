"""The record batch as pydantic-core checks it in one pass on the record route.

``RecordCreate`` has one check that pydantic runs as a Python call per record, its model
validator (nonconforming <= units): about 0.6 us of the 2.2 us a record of a 1000-record
batch costs to validate. The models here are ``RecordCreate`` and ``RecordBatchCreate``
without it (every field and constraint inherited); :func:`counts_hold` makes that check
afterwards in one loop. A batch that fails either is checked again the slow way, through
``RecordCreate`` itself, which names each fault (``Monitor._check_json``), so answers do not
change. ``tests/test_batch_schema.py`` compares the schemas and both ways on seeded batches.
"""
from __future__ import annotations

from pydantic import Field, TypeAdapter

from .schemas import RecordBatchCreate, RecordCreate


class RecordUnchecked(RecordCreate):
    """RecordCreate without the counts check (see the module docstring)."""

    def _counts(self):          # same name: replaces (removes) RecordCreate's model validator
        return self


class BatchUnchecked(RecordBatchCreate):
    records: list[RecordUnchecked] = Field(min_length=1, max_length=1000)


BATCH_UNCHECKED = TypeAdapter(BatchUnchecked)


def counts_hold(records) -> bool:
    """Whether no record claims more nonconforming units than units (RecordCreate's check)."""
    return all(r.nonconforming <= r.units for r in records)
