"""Webhooks: allow-listed targets, per-team HMAC signatures, a delivery outbox with backoff."""
