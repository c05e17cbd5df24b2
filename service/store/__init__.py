"""The one package that owns SQLite: one module per table family, composed into one Store.

- :mod:`.base`: connections, write transactions, counters, the action log
- :mod:`.keys`, :mod:`.facilities` (and cycles), :mod:`.records` (ingest),
  :mod:`.voids`,
  :mod:`.record_keys` (finding a record by its id),
  :mod:`.alerts`, :mod:`.outbox` (webhooks, job leases, sessions), :mod:`.watch` (the
  watch chart of a cleared cycle), :mod:`.findings` (what a review found)
- :mod:`.group_commit` (the writer thread), :mod:`.migrations`, :mod:`.common` (helpers)

Callers use :class:`Store` and never the modules' mixins directly.
"""
from __future__ import annotations

from .alerts import AlertsMixin
from .base import StoreBase
from .common import KEY_PREFIX, ROLES, hash_key, plan_from_snapshot, plan_of
from .facilities import FacilitiesMixin
from .frames import FramesMixin
from .findings import FindingsMixin
from .keys import KeysMixin
from .outbox import OutboxMixin, SessionMixin
from .program import ProgramMixin
from .record_keys import RecordKeysMixin
from .records import IngestOutcome, RecordIn, RecordsMixin
from .voids import VoidsMixin
from .watch import WatchMixin

__all__ = ["Store", "RecordIn", "IngestOutcome", "hash_key", "plan_of", "plan_from_snapshot",
           "ROLES", "KEY_PREFIX"]


class Store(KeysMixin, FacilitiesMixin, RecordsMixin, VoidsMixin, WatchMixin, FindingsMixin,
            AlertsMixin, FramesMixin, OutboxMixin, SessionMixin, ProgramMixin, RecordKeysMixin,
            StoreBase):
    """Access to one SQLite file; safe to share between threads (one connection each)."""
