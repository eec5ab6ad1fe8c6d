"""Atomic file writes: write to a temporary file in the same folder, then rename."""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path
from typing import Any


def _default_mode() -> int:
    """Permissions an ordinary new file gets (0666 less the process umask)."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


DEFAULT_MODE = _default_mode()


def atomic_write_bytes(path: str | os.PathLike[str], data: bytes) -> Path:
    """Write ``data`` to ``path`` so that readers see either the old or the new file, never a part."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        os.chmod(tmp, DEFAULT_MODE)  # mkstemp makes 0600 files; results are ordinary files
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def atomic_write_text(path: str | os.PathLike[str], text: str) -> Path:
    return atomic_write_bytes(path, text.encode("utf-8"))


def atomic_write_json(path: str | os.PathLike[str], data: Any) -> Path:
    return atomic_write_text(path, json.dumps(data, indent=2) + "\n")
