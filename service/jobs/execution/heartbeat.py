"""The holder of a claim keeps it alive: a thread renews the lease while the unit runs.

A claim lasts `settings.lease_seconds` past its last renewal, whatever the unit's time limit, so
a dead worker's unit is claimable again within about a minute (docs/reliability.md). The thread
runs in the process that fits, with its own short sessions, and renews every
`settings.heartbeat_seconds`. The claim counts as lost when a renewal finds it taken over (the
conditional UPDATE changed no row) or when no renewal has succeeded for a lease less one
heartbeat (the database is unreachable: the holder gives up a heartbeat before its lease can
run out, so it stops before another worker may take the unit). A lost claim stops the unit
at its next check between fits and records nothing; the record itself is fenced on the claim
token too (lifecycle.unit_done), for a copy that finishes before it notices.
"""

from __future__ import annotations

import logging
import threading
import time
from types import TracebackType

from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.jobs import lifecycle

log = logging.getLogger(__name__)


class Heartbeat:
    """Renews one claim's lease from a daemon thread until the unit ends (use it as `with`)."""

    def __init__(
        self, sessions: sessionmaker[Session], unit_id: int, token: str, settings: Settings
    ) -> None:
        self.sessions, self.unit_id, self.token = sessions, unit_id, token
        self.lease, self.every = settings.unit_lease, settings.heartbeat_seconds
        # when the lease in the store was last set from: the claim set the first one moments
        # ago; after that, each renewal reads the store's clock after this point
        self.renewed_at = time.monotonic()
        self.renewals = 0
        self._lost = threading.Event()
        self._stop = threading.Event()
        self._thread = threading.Thread(
            target=self._run, name=f"foldwise-lease-{unit_id}", daemon=True
        )

    def lost(self) -> bool:
        """True once the claim may no longer be this copy's: stop, and record nothing."""
        # renewals failing or hanging on an unreachable database: give up one beat early. Once
        # given up, for good: the unit is stopping, and a renewal when the store answers again
        # must not make a stopped copy look like the holder (it would mark the unit cancelled)
        if time.monotonic() - self.renewed_at >= self.lease.total_seconds() - self.every:
            self._lost.set()
        return self._lost.is_set()

    def renew(self, session: Session) -> bool:
        """One renewal of the claim's lease; False when it is no longer (all) this copy's."""
        return lifecycle.renew_lease(session, self.unit_id, self.token, self.lease)

    def _run(self) -> None:
        while not self._stop.wait(self.every) and not self.lost():
            attempted = time.monotonic()
            try:
                with self.sessions.begin() as session:
                    held = self.renew(session)
            except Exception:  # the database is unreachable: try again on the next beat
                log.warning("unit %s: lease renewal failed", self.unit_id, exc_info=True)
                continue
            if not held:
                # taken over after our lease lapsed, or ended by someone else: never renew again
                log.warning("unit %s: claim taken over; stopping it", self.unit_id)
                self._lost.set()
                return
            self.renewed_at = attempted
            self.renewals += 1

    def __enter__(self) -> Heartbeat:
        self._thread.start()
        return self

    def __exit__(
        self,
        kind: type[BaseException] | None,
        value: BaseException | None,
        traceback: TracebackType | None,
    ) -> None:
        self.stop()

    def stop(self) -> None:
        """No more renewals: called once the fits are over, before the unit's ending is written.

        The lease still has most of its length to run, and that write is fenced on the claim,
        so stopping first only keeps a renewal from racing the write and reading the ended unit
        as a claim taken over.
        """
        self._stop.set()
        # a renewal in flight is a short UPDATE; one stuck on a dead connection is abandoned
        # (daemon thread) rather than holding up the worker, and its UPDATE matches no ended unit
        if self._thread.is_alive() and self._thread is not threading.current_thread():
            self._thread.join(timeout=self.every)
