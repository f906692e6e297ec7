"""Signatures a receiver checks: HMAC-SHA256 (RFC 2104) of the exact body bytes."""

from __future__ import annotations

import hashlib
import hmac
import json
from typing import Any

SIGNATURE_HEADER = "X-Foldwise-Signature"


def team_secret(secret_key: str, team: str) -> str:
    """A team's webhook secret: hex HMAC-SHA256 of the team name under the server's key.

    Receivers use the hex text itself as their HMAC key; deriving it means the server stores
    no per-team secret, and rotating FOLDWISE_SECRET_KEY rotates them all.
    """
    return hmac.new(secret_key.encode(), team.encode(), hashlib.sha256).hexdigest()


def body_bytes(body: dict[str, Any]) -> bytes:
    """The bytes sent (and signed): compact JSON with sorted keys, so a resend is identical."""
    return json.dumps(body, sort_keys=True, separators=(",", ":"), allow_nan=False).encode()


def signature(secret: str, payload: bytes) -> str:
    """The header value: `sha256=` and the hex HMAC-SHA256 of `payload` under `secret`."""
    return "sha256=" + hmac.new(secret.encode(), payload, hashlib.sha256).hexdigest()
