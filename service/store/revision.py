"""The store's newest schema revision, in a module of its own so a light reader can check it.

The newest revision in migrations/versions (a test holds it to Alembic's own head). A store
already there is left alone without importing Alembic, which costs a command half a second, and
`foldwise select` reads a repeated request's answer only from a store at this revision, before
it imports SQLAlchemy at all (service/store/repeat_answers.py).
"""

from __future__ import annotations

HEAD_REVISION = "0014"
