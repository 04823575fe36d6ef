"""The one way qamsmith writes: atomically, so a failure leaves nothing half-written.

`write_file` writes a temporary file beside the target and renames it; `replace_directory`
builds a whole directory beside the target and swaps it in with one rename, carrying over the
entries it is told to keep. Failures raise SpecError naming the key the user set for the path.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path
from typing import Mapping, Sequence

from ..errors import SpecError


def _refuse(key: str, path: Path, exc: OSError, what: str = "a writable directory") -> SpecError:
    """The refusal of a path that could not be written: the file in the way when there is one, else the OS's words."""
    blocker = next((p for p in (path, *path.parents) if p.is_file()), None)
    reason = f"the file '{blocker}' is in the way" if blocker is not None else exc.strerror or str(exc)
    return SpecError(key, str(path), f"{what} ({reason})")


def write_file(path: str | Path, data: bytes | str, *, key: str = "--out") -> Path:
    """Write one file through a temporary file beside it and a rename."""
    path = Path(path)
    payload = data.encode() if isinstance(data, str) else data
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        if path.is_dir():
            raise SpecError(key, str(path), "a file path (a directory is in the way)")
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    except OSError as exc:
        raise _refuse(key, path, exc, "a writable location") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(payload)
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except OSError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise _refuse(key, path, exc, "a writable location") from None
    return path


def probe_directory(target: str | Path, *, key: str = "--out") -> None:
    """Refuse (SpecError) a directory that could not be written, before any long computation."""
    target = Path(target)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.rmtree(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".probe", dir=target.parent))
    except OSError as exc:
        raise _refuse(key, target.parent, exc) from None
    if target.exists() and not target.is_dir():
        raise SpecError(key, str(target), "a directory (a file of that name is in the way)")


def probe_file(path: str | Path, *, key: str = "--out") -> None:
    """Refuse (SpecError) a file path that could not be written, before any long computation; leaves nothing."""
    path = Path(path)
    if path.is_dir():
        raise SpecError(key, str(path), "a file path (a directory is in the way)")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".probe", dir=path.parent)
        os.close(fd)
        os.unlink(tmp)
    except OSError as exc:
        raise _refuse(key, path, exc, "a writable location") from None


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def replace_directory(target: str | Path, files: Mapping[str, bytes], *, keep: Mapping[str, str] | Sequence[str] = (),
                      key: str = "--out") -> Path:
    """Make `target` hold exactly `files` (relative path -> bytes) plus existing entries it keeps.

    `keep` lists relative paths kept where they are, or maps old relative paths to new ones.

    The new directory is built beside the target and swapped in by a rename; on any failure the
    old directory is back in place and nothing new remains.
    """
    target = Path(target)
    kept = dict(keep) if isinstance(keep, Mapping) else {rel: rel for rel in keep}
    if target.exists() and not target.is_dir():
        raise SpecError(key, str(target), "a directory (a file of that name is in the way)")
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".new", dir=target.parent))
    except OSError as exc:
        raise _refuse(key, target.parent, exc) from None
    moved: list[str] = []
    old: Path | None = None
    try:
        os.chmod(staging, 0o777 & ~_umask())
        for rel, content in files.items():
            path = staging / rel
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_bytes(content)
        for src, dst in kept.items():                     # what the user or another command put there
            (staging / dst).parent.mkdir(parents=True, exist_ok=True)
            os.rename(target / src, staging / dst)
            moved.append(src)
        if target.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".old", dir=target.parent))
            os.rename(target, old / "d")
        os.rename(staging, target)
    except BaseException as exc:
        if old is not None and not target.exists():
            os.rename(old / "d", target)
        for src in moved:                                 # the kept entries go back where they were
            dst = staging / kept[src]
            if dst.exists() or dst.is_symlink():
                os.rename(dst, target / src)
        shutil.rmtree(staging, ignore_errors=True)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
        if isinstance(exc, OSError):
            raise _refuse(key, target, exc) from None
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
    return target


__all__ = ["probe_directory", "probe_file", "replace_directory", "write_file"]
