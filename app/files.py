"""Where the app keeps its own files: recent files and recovery copies.

The folder is the user's data folder from :mod:`platformdirs`
(``LOOPKIT_APP_DIR`` overrides it, for tests and portable installs).  Design
files themselves are written by :func:`loopkit.save_design`, which writes a
temporary file beside the target and renames it (atomic on one file system).

Recovery: while a design has unsaved changes the window writes its TOML text
to ``recovery/`` every few seconds; a clean save or a clean exit removes it.
A recovery file left behind means the app stopped without saving, and the next
start offers to restore it.
"""

from __future__ import annotations

import json
import os
import tempfile
import time
import uuid
from dataclasses import dataclass
from pathlib import Path

__all__ = ["RecentFiles", "Recovery", "RecoveryEntry", "app_dir", "write_text_atomic"]

_MAX_RECENT = 8


def app_dir() -> Path:
    """The app's data folder (created on demand)."""
    override = os.environ.get("LOOPKIT_APP_DIR")
    if override:
        path = Path(override)
    else:
        import platformdirs

        path = Path(platformdirs.user_data_dir("loopkit", appauthor=False))
    path.mkdir(parents=True, exist_ok=True)
    return path


def write_text_atomic(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` through a temporary file and a rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


class RecentFiles:
    """The most recently opened or saved design files, newest first."""

    def __init__(self, folder: Path | None = None):
        self._file = (folder or app_dir()) / "recent.json"

    def paths(self) -> list[str]:
        """Recent files that still exist, newest first."""
        try:
            items = json.loads(self._file.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return []
        return [p for p in items if isinstance(p, str) and Path(p).is_file()][:_MAX_RECENT]

    def add(self, path) -> list[str]:
        """Put ``path`` first; returns the new list."""
        path = str(Path(path).resolve())
        items = [path] + [p for p in self.paths() if p != path]
        items = items[:_MAX_RECENT]
        write_text_atomic(self._file, json.dumps(items, indent=1))
        return items

    def clear(self) -> None:
        write_text_atomic(self._file, "[]")


@dataclass(frozen=True)
class RecoveryEntry:
    """One recovery copy left by a session that did not end cleanly."""

    toml_path: Path
    original: str  # the design file the work belongs to ("" = never saved)
    saved_at: float  # time.time() of the copy

    @property
    def label(self) -> str:
        name = Path(self.original).name if self.original else "an unsaved design"
        stamp = time.strftime("%Y-%m-%d %H:%M", time.localtime(self.saved_at))
        return f"{name} (autosaved {stamp})"


class Recovery:
    """Autosave copies of unsaved work for one window session."""

    def __init__(self, folder: Path | None = None):
        self.folder = (folder or app_dir()) / "recovery"
        self._id = uuid.uuid4().hex[:12]

    @property
    def toml_path(self) -> Path:
        return self.folder / f"{self._id}.toml"

    @property
    def _meta_path(self) -> Path:
        return self.folder / f"{self._id}.json"

    def write(self, toml_text: str, original: str) -> None:
        """Store the current unsaved work."""
        write_text_atomic(self.toml_path, toml_text)
        write_text_atomic(self._meta_path, json.dumps({"original": original, "saved_at": time.time()}))

    def discard(self) -> None:
        """Remove this session's copy (after a save or a clean exit)."""
        for p in (self.toml_path, self._meta_path):
            try:
                p.unlink()
            except FileNotFoundError:
                pass

    def leftovers(self) -> list[RecoveryEntry]:
        """Copies left by other sessions, newest first."""
        if not self.folder.is_dir():
            return []
        found = []
        for toml_path in self.folder.glob("*.toml"):
            if toml_path == self.toml_path:
                continue
            meta_path = toml_path.with_suffix(".json")
            try:
                meta = json.loads(meta_path.read_text(encoding="utf-8"))
            except (OSError, ValueError):
                meta = {}
            found.append(RecoveryEntry(toml_path, str(meta.get("original", "")),
                                       float(meta.get("saved_at", toml_path.stat().st_mtime))))
        return sorted(found, key=lambda e: -e.saved_at)

    @staticmethod
    def remove(entry: RecoveryEntry) -> None:
        """Delete a leftover copy (restored or declined)."""
        for p in (entry.toml_path, entry.toml_path.with_suffix(".json")):
            try:
                p.unlink()
            except FileNotFoundError:
                pass
