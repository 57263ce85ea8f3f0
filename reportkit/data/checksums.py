"""SHA-256 checksums of input files, streamed in chunks so large files never sit in memory.

The digest (FIPS 180-4, 2015) identifies the exact bytes an analysis read; the bundle's
manifest and the provenance section of the appendix carry it, so that a data editor can
tell whether the file they hold is the one that was analysed.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

from reportkit.results import InputFile

CHUNK_BYTES = 1 << 20  # 1 MiB: large enough to be fast, small enough to stream


def file_digest(
    path: Path, role: str, name: str | None = None, chunk_bytes: int = CHUNK_BYTES
) -> InputFile:
    """SHA-256 (lower-case hex) and size in bytes of ``path``.

    ``name`` is how the file is shown in results (default: the file name, so that no
    machine-specific folder reaches the output). Raises ``OSError`` when the file cannot
    be read; callers turn that into the error class of their stage.
    """
    digest = hashlib.sha256()
    size = 0
    with path.open("rb") as handle:
        while chunk := handle.read(chunk_bytes):
            digest.update(chunk)
            size += len(chunk)
    shown = name if name is not None else path.name
    return InputFile(role=role, name=shown, sha256=digest.hexdigest(), size_bytes=size)
