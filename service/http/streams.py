"""Streamed downloads: every export route answers with one shape of attachment."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from fastapi.responses import StreamingResponse


def attachment(chunks: Iterator[Any], media_type: str, filename: str) -> StreamingResponse:
    """Send `chunks` as they come, as a file the browser saves under `filename`."""
    return StreamingResponse(
        chunks,
        media_type=media_type,
        headers={"Content-Disposition": f'attachment; filename="{filename}"'},
    )
