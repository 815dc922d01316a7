"""Writing result files: atomic writes (temporary sibling, then rename) and strict JSON."""

from __future__ import annotations

import json
import math
import os
import tempfile
from pathlib import Path
from typing import Any

from .errors import InputError


def _json_default(value: Any) -> Any:
    import numpy as np

    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"cannot write {type(value).__name__} to JSON")


def clean_json(value: Any) -> Any:
    """Replace NaN and infinities (not JSON) by None, recursively."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: clean_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean_json(v) for v in value]
    return value


def write_atomic(path: Path, data: bytes | str) -> None:
    """Write a file through a temporary sibling and rename, so a reader never sees half of it."""
    path = Path(path)
    payload = data.encode() if isinstance(data, str) else data
    for parent in (path.parent, *path.parent.parents):
        if parent.exists():
            if not parent.is_dir():
                raise InputError(f"cannot write {path}: {parent} is a file, not a folder; "
                                 "choose another path")
            break
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    except OSError as exc:
        raise InputError(f"cannot write {path}: {exc.strerror}; choose a writable path") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(payload)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; results are ordinary files
        os.replace(tmp, path)
    except OSError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise InputError(f"cannot write {path}: {exc.strerror}; choose a writable path") from None


def write_json(path: Path, document: dict[str, Any]) -> None:
    text = json.dumps(clean_json(document), indent=2, default=_json_default, allow_nan=False)
    write_atomic(path, text + "\n")
