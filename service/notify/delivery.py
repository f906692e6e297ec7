"""The delivery tick: POST due notifications, signed, and record every attempt.

Retries back off exponentially (base, 5·base, 25·base, ...) up to MAX_ATTEMPTS. A delivery is
claimed by pushing its next_attempt_at past the request timeout with a conditional update, so two
ticks at once never send the same attempt twice.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

import httpx
from sqlalchemy import CursorResult, select, update
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.errors import BadInput
from service.notify.signing import SIGNATURE_HEADER, body_bytes, signature, team_secret
from service.notify.targets import check_webhook_target
from service.store.db import utcnow
from service.store.followup_models import WebhookDelivery

log = logging.getLogger(__name__)
MAX_ATTEMPTS = 6
BATCH = 20


@dataclass(frozen=True)
class DeliveryReport:
    """What one tick did."""

    delivered: int = 0
    retried: int = 0
    gave_up: int = 0


def backoff(settings: Settings, attempts: int) -> timedelta:
    """Wait before the next attempt after `attempts` failed ones: base·5^(attempts-1)."""
    return timedelta(seconds=settings.webhook_backoff * 5 ** (attempts - 1))


def _claim(session: Session, delivery: WebhookDelivery, now: datetime, hold: timedelta) -> bool:
    moved: CursorResult[Any] = session.execute(  # type: ignore[assignment]
        update(WebhookDelivery)
        .where(
            WebhookDelivery.id == delivery.id,
            WebhookDelivery.status == "pending",
            WebhookDelivery.next_attempt_at == delivery.next_attempt_at,
        )
        .values(next_attempt_at=now + hold)
    )
    return moved.rowcount == 1


def _post(
    client: httpx.Client, url: str, payload: bytes, sig: str
) -> tuple[int | None, str | None]:
    headers = {"Content-Type": "application/json", SIGNATURE_HEADER: sig}
    try:
        answer = client.post(url, content=payload, headers=headers)
    except (httpx.HTTPError, httpx.InvalidURL) as exc:
        return None, f"{type(exc).__name__}: {exc}"
    if 200 <= answer.status_code < 300:
        return answer.status_code, None
    # redirects are not followed: a 3xx is a failed attempt like any other non-2xx
    return answer.status_code, f"HTTP {answer.status_code}: {answer.text[:200]}"


def deliver_due(
    sessions: sessionmaker[Session], settings: Settings, *, now: datetime | None = None
) -> DeliveryReport:
    """Send the deliveries due at `now` (default: the current time); one attempt each."""
    if settings.secret_key is None:
        # unsigned notifications would be unverifiable: refuse to send any
        return DeliveryReport()
    now = now or utcnow()
    hold = timedelta(seconds=settings.webhook_timeout * 4)
    with sessions.begin() as session:
        due = list(
            session.scalars(
                select(WebhookDelivery)
                .where(WebhookDelivery.status == "pending", WebhookDelivery.next_attempt_at <= now)
                .order_by(WebhookDelivery.next_attempt_at, WebhookDelivery.id)
                .limit(BATCH)
            )
        )
        mine = [(d.id, d.team, d.url, d.body) for d in due if _claim(session, d, now, hold)]
    delivered = retried = gave_up = 0
    with httpx.Client(timeout=settings.webhook_timeout, follow_redirects=False) as client:
        for delivery_id, team, url, body in mine:
            # one row's trouble (a URL no request could send, a store hiccup) is recorded on that
            # row and never keeps the others of this tick from going out
            try:
                outcome = _attempt(sessions, settings, client, delivery_id, team, url, body, now)
            except Exception:
                log.exception("webhook %s could not be attempted", delivery_id)
                continue
            delivered += outcome == "delivered"
            retried += outcome == "retried"
            gave_up += outcome == "failed"
    return DeliveryReport(delivered, retried, gave_up)


def _attempt(
    sessions: sessionmaker[Session],
    settings: Settings,
    client: httpx.Client,
    delivery_id: int,
    team: str,
    url: str,
    body: Any,
    now: datetime,
) -> str:
    assert settings.secret_key is not None  # deliver_due sends nothing without it
    final = False
    status: int | None
    error: str | None
    try:
        # checked again as it is sent: a row may predate a rule, or the operator may have
        # removed its prefix since; such a URL never becomes sendable, so no retry
        target = check_webhook_target(url, settings, field="url")
    except BadInput as exc:
        status, error, final = None, f"not sent: the URL {exc.message}", True
    else:
        payload = body_bytes(body)
        sig = signature(team_secret(settings.secret_key, team), payload)
        status, error = _post(client, target, payload, sig)
    with sessions.begin() as session:
        row = session.get_one(WebhookDelivery, delivery_id)
        row.attempts += 1
        row.last_status, row.last_error = status, error
        if error is None:
            row.status, row.delivered_at, row.next_attempt_at = "delivered", utcnow(), None
            outcome = "delivered"
        elif final or row.attempts >= MAX_ATTEMPTS:
            row.status, row.next_attempt_at = "failed", None
            outcome = "failed"
        else:
            row.next_attempt_at = now + backoff(settings, row.attempts)
            outcome = "retried"
    if error is not None:
        log.warning("webhook %s to %r failed: %s", delivery_id, url, error)
    return outcome
