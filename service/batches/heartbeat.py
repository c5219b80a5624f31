"""Keeps a chunk's lease alive from a side thread while the main thread tags."""

from __future__ import annotations

import logging
import threading
from types import TracebackType

from sqlalchemy.orm import Session, sessionmaker

from service.batches.leases import Claim, extend_lease

log = logging.getLogger(__name__)


class LeaseKeeper:
    """Extends the lease every `interval` seconds; sets `lost` when it is no longer ours.

    A failed heartbeat (database briefly unreachable) is retried at the next
    tick; the lease is long enough to survive a few.
    """

    def __init__(
        self,
        sessions: sessionmaker[Session],
        claim: Claim,
        *,
        lease_seconds: float,
        interval: float,
    ) -> None:
        self.sessions = sessions
        self.claim = claim
        self.lease_seconds = lease_seconds
        self.interval = interval
        self.lost = threading.Event()
        self._done = threading.Event()
        self._thread = threading.Thread(
            target=self._beat, name=f"heartbeat-{claim.chunk_id}", daemon=True
        )

    def __enter__(self) -> LeaseKeeper:
        self._thread.start()
        return self

    def __exit__(
        self,
        _type: type[BaseException] | None,
        _value: BaseException | None,
        _trace: TracebackType | None,
    ) -> None:
        self._done.set()
        self._thread.join()

    def _beat(self) -> None:
        while not self._done.wait(self.interval):
            try:
                with self.sessions.begin() as session:
                    held = extend_lease(session, self.claim, self.lease_seconds)
            except Exception as exc:
                log.warning("heartbeat for chunk %s failed: %s", self.claim.chunk_id, exc)
                continue
            if not held:
                log.warning(
                    "lost the lease on chunk %s of batch %s",
                    self.claim.chunk_index,
                    self.claim.batch_id,
                )
                self.lost.set()
                return
