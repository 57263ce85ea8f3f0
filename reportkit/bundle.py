"""Writing the output bundle atomically, with a manifest of checksums.

Everything is written into a temporary folder beside the destination and moved into
place only when complete: a failed run leaves nothing behind, and an existing bundle is
replaced only when overwriting was asked for (then it is swapped out in one rename and
deleted only after the new bundle is in place).
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from collections.abc import Mapping
from pathlib import Path

from reportkit.errors import OutputError

MANIFEST = "manifest.json"


def check_destination(dest: Path, overwrite: bool) -> None:
    """Fail early (before any computing) when the bundle folder cannot be written."""
    if dest.exists() and not overwrite:
        raise OutputError(
            f"the output folder '{dest.name}' already exists; choose another folder, or "
            "pass --overwrite to replace it (the old bundle is removed only after the new "
            "one is complete)",
            where=str(dest.name),
        )
    if dest.exists() and not dest.is_dir():
        raise OutputError(f"'{dest.name}' exists and is not a folder", where=str(dest.name))
    parent = dest.parent if str(dest.parent) else Path(".")
    if parent.exists() and not parent.is_dir():
        raise OutputError(f"'{parent}' is not a folder", where=str(dest))


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def path_from_bundle(target: Path, bundle: Path) -> str | None:
    """Where ``target`` is, seen from the bundle folder: a relative POSIX path.

    Written into the manifest and the resolved spec so that ``reportkit verify`` finds the
    inputs from the bundle alone, wherever the project folder sits, without putting
    absolute machine paths into the bundle. Both paths are resolved first (symbolic
    links followed), because the operating system resolves ``..`` from the real folder.
    None when no relative path exists (different drives on Windows).
    """
    try:
        rel = os.path.relpath(target.resolve(), bundle.resolve())
    except ValueError:
        return None
    return Path(rel).as_posix()


def write_bundle(
    dest: Path,
    files: Mapping[str, bytes],
    manifest_extra: Mapping[str, object],
    *,
    overwrite: bool = False,
) -> Path:
    """Write ``files`` (relative path -> bytes) plus manifest.json to ``dest`` atomically."""
    check_destination(dest, overwrite)
    parent = dest.parent if str(dest.parent) else Path(".")
    parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{dest.name}.partial-", dir=parent))
    try:
        for rel, data in sorted(files.items()):
            target = tmp / rel
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(data)
        outputs = [
            {"path": rel, "sha256": sha256_bytes(data), "size_bytes": len(data)}
            for rel, data in sorted(files.items())
        ]
        manifest = {**manifest_extra, "outputs": outputs}
        (tmp / MANIFEST).write_text(json.dumps(manifest, indent=2, sort_keys=True) + "\n")
        if dest.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{dest.name}.old-", dir=parent))
            old.rmdir()
            dest.rename(old)
            try:
                tmp.rename(dest)
            except BaseException:
                old.rename(dest)
                raise
            shutil.rmtree(old, ignore_errors=True)
        else:
            tmp.rename(dest)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return dest
