"""Where a dataset path points: resolved, and inside the configured data roots.

Kept apart from the loaders (pandas, pyarrow) so that a command can find a request's file, and
the bytes it holds, without importing what reading the table needs.
"""

from __future__ import annotations

from pathlib import Path

from service.errors import BadInput


def resolve_dataset_path(
    raw: str, *, base_dir: Path, data_roots: tuple[Path, ...], field: str
) -> Path:
    """Absolute path with symlinks and `..` resolved, refused if it leaves the data roots."""
    try:
        candidate = Path(raw).expanduser()
        if not candidate.is_absolute():
            candidate = base_dir / candidate
        # Resolve before the roots check so neither `..` nor a symlink can step outside a root.
        path = candidate.resolve()
    except (OSError, RuntimeError, ValueError):
        # NUL bytes, names too long and symlink loops all land here; none is a file we can read.
        raise BadInput(
            field, f"{raw!r} is not a usable file path; give the path of a file."
        ) from None
    roots = [root.expanduser().resolve() for root in data_roots]
    # Checked before existence, so callers cannot probe for files outside the roots.
    if roots and not any(path.is_relative_to(root) for root in roots):
        raise BadInput(
            field,
            f"{path} is outside the configured data roots (FOLDWISE_DATA_ROOTS); "
            f"move the file under {' or '.join(str(r) for r in roots)} "
            "or add its folder to FOLDWISE_DATA_ROOTS.",
        )
    return path
