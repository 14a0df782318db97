"""Where the app keeps its own files: recent files and recovery copies.

The folder is the user's data folder from :mod:`platformdirs`
(``LOOPKIT_APP_DIR`` overrides it, for tests and portable installs).  Design
files and exports are written by loopkit's one writer
(:mod:`loopkit.atomicfile`: a temporary file beside the target, then a
rename), with the same permissions as the command line gives them.

Recovery: while a design has unsaved changes the window writes its TOML text
to ``recovery/`` every few seconds; a clean save or a clean exit removes it.
A recovery file left behind means the app stopped without saving, and the next
start offers to restore it.  A copy whose description cannot be read (not a
JSON object, a time stamp that is not a time) is moved to ``recovery/set-aside/``
and reported once, instead of failing every start.
"""

from __future__ import annotations

import json
import math
import os
import time
import uuid
from dataclasses import dataclass
from pathlib import Path

from loopkit import atomicfile

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
    """Write one of the app's own files (recent list, recovery copies): loopkit's atomic writer, private (0600).

    Files the user asks for (designs, exports) are written by
    :func:`loopkit.atomicfile.write_text_atomic` with the usual permissions,
    exactly as the command line writes them.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    atomicfile.write_text_atomic(path, text, new_mode=0o600)


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
        if not isinstance(items, list):  # a damaged list: start a new one rather than fail every start
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


class _Corrupt(ValueError):
    """A recovery copy whose description cannot be read."""


class Recovery:
    """Autosave copies of unsaved work for one window session."""

    def __init__(self, folder: Path | None = None):
        self.folder = (folder or app_dir()) / "recovery"
        self._id = uuid.uuid4().hex[:12]
        #: (where it went, why) of each copy that :meth:`leftovers` set aside
        self.set_aside: list[tuple[Path, str]] = []

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
        """Copies left by other sessions, newest first; unreadable ones are set aside (see :attr:`set_aside`)."""
        self.set_aside: list[tuple[Path, str]] = []
        if not self.folder.is_dir():
            return []
        found = []
        for toml_path in self.folder.glob("*.toml"):
            if toml_path == self.toml_path:
                continue
            try:
                found.append(self._entry(toml_path))
            except _Corrupt as exc:
                self.set_aside.append((self._set_aside(toml_path), str(exc)))
        return sorted(found, key=lambda e: -e.saved_at)

    @staticmethod
    def _entry(toml_path: Path) -> RecoveryEntry:
        meta_path = toml_path.with_suffix(".json")
        try:
            meta = json.loads(meta_path.read_text(encoding="utf-8"))
        except FileNotFoundError:
            meta = {}  # the app stopped between writing the copy and its description: still a copy
        except (OSError, ValueError) as exc:
            raise _Corrupt(f"its description {meta_path.name} cannot be read ({exc})") from None
        if not isinstance(meta, dict):
            raise _Corrupt(f"its description {meta_path.name} is not a table of original and saved_at")
        original = meta.get("original", "")
        if not isinstance(original, str):
            raise _Corrupt(f"its original file name is not text: {str(original)[:80]}")
        try:
            saved_at = meta["saved_at"] if "saved_at" in meta else toml_path.stat().st_mtime
            if isinstance(saved_at, bool) or not isinstance(saved_at, (int, float)):
                raise TypeError
            saved_at = float(saved_at)
            if not math.isfinite(saved_at):
                raise ValueError
            time.localtime(saved_at)  # a time the label can show
        except (TypeError, ValueError, OverflowError, OSError):
            raise _Corrupt(f"its time stamp is not a time: {str(meta.get('saved_at'))[:80]}") from None
        return RecoveryEntry(toml_path, original, saved_at)

    def _set_aside(self, toml_path: Path) -> Path:
        """Move a copy that cannot be offered (and its description) out of the way, keeping it for the user."""
        aside = self.folder / "set-aside"
        aside.mkdir(parents=True, exist_ok=True)
        moved = aside / toml_path.name
        for p, q in ((toml_path, moved), (toml_path.with_suffix(".json"), moved.with_suffix(".json"))):
            try:
                os.replace(p, q)
            except FileNotFoundError:
                pass
            except OSError:
                Recovery.remove(RecoveryEntry(toml_path, "", 0.0))  # cannot move: remove, never fail each start
                return toml_path
        return moved

    @staticmethod
    def remove(entry: RecoveryEntry) -> None:
        """Delete a leftover copy (restored or declined)."""
        for p in (entry.toml_path, entry.toml_path.with_suffix(".json")):
            try:
                p.unlink()
            except FileNotFoundError:
                pass
