"""The window's own settings: a small JSON file holding only values changed from the defaults.

What is kept: the recent batches, the batch open at the last close, the place
in the review of each batch (the field shown and the order), the form template
used or saved last (offered when scans are opened next), and the window
layout (geometry and splitter positions, as base64 of Qt's state bytes).
Everything about a batch itself (values, review states, threshold) lives in
the batch file, not here.

The file is ``window.json`` in the user's configuration folder, or the path in
the ``INKCOUNT_WINDOW_SETTINGS`` environment variable. It is written to a
temporary file and renamed into place; :meth:`WindowSettings.save` returns the
reason when that fails instead of raising, so the window can say so.
"""

from __future__ import annotations

import copy
import json
import os
from pathlib import Path
from typing import Any

__all__ = ["DEFAULTS", "MAX_RECENT", "WindowSettings", "default_settings_path"]

MAX_RECENT = 8
ENV_VAR = "INKCOUNT_WINDOW_SETTINGS"

#: Every setting and its default; the file holds only the keys that differ.
DEFAULTS: dict[str, Any] = {
    "recent_batches": [],
    "last_batch": None,
    "review_positions": {},
    "geometry": None,
    "window_state": None,
    "splitter": None,
    "tab": 0,
    "order": "page",
    "last_template": None,
}


def default_settings_path() -> Path:
    """Where the settings live: ``$INKCOUNT_WINDOW_SETTINGS`` or Qt's configuration folder."""
    env = os.environ.get(ENV_VAR)
    if env:
        return Path(env)
    from PySide6.QtCore import QStandardPaths

    base = QStandardPaths.writableLocation(QStandardPaths.StandardLocation.AppConfigLocation)
    return Path(base or Path.home() / ".config" / "inkcount") / "window.json"


class WindowSettings:
    """Settings read at start and written on change.

    Parameters
    ----------
    path : Path, optional
        The JSON file (default :func:`default_settings_path`). A missing or
        damaged file gives the defaults (``problem`` says why for a damaged one).
    """

    def __init__(self, path: Path | None = None) -> None:
        self.path = Path(path) if path is not None else default_settings_path()
        self.problem: str | None = None
        self._values: dict[str, Any] = {}
        try:
            stored = json.loads(self.path.read_text(encoding="utf-8"))
            if isinstance(stored, dict):
                self._values = {k: v for k, v in stored.items() if k in DEFAULTS}
        except FileNotFoundError:
            pass
        except (OSError, ValueError) as exc:
            self.problem = f"could not read the window settings {self.path} ({exc}); using the defaults"

    def get(self, key: str) -> Any:
        return copy.deepcopy(self._values.get(key, DEFAULTS[key]))

    def set(self, key: str, value: Any) -> None:
        if key not in DEFAULTS:
            raise KeyError(f"unknown window setting {key!r}")
        if value == DEFAULTS[key]:
            self._values.pop(key, None)
        else:
            self._values[key] = copy.deepcopy(value)

    def stored(self) -> dict[str, Any]:
        """The values that will be written (those that differ from the defaults)."""
        return copy.deepcopy(self._values)

    def add_recent(self, batch: str | os.PathLike) -> None:
        path = str(Path(batch).absolute())
        recent = [p for p in self.get("recent_batches") if p != path]
        self.set("recent_batches", [path, *recent][:MAX_RECENT])

    def review_position(self, batch: str | os.PathLike) -> dict[str, Any]:
        return self.get("review_positions").get(str(Path(batch).absolute()), {})

    def set_review_position(self, batch: str | os.PathLike, **position: Any) -> None:
        positions = self.get("review_positions")
        positions[str(Path(batch).absolute())] = position
        self.set("review_positions", positions)

    def save(self) -> str | None:
        """Write the file; return None, or the reason it could not be written."""
        tmp = self.path.with_name(f".{self.path.name}.partial")
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            tmp.write_text(json.dumps(self._values, indent=1, sort_keys=True), encoding="utf-8")
            os.replace(tmp, self.path)
        except OSError as exc:
            try:
                tmp.unlink(missing_ok=True)
            except OSError:
                pass
            return f"could not save the window settings to {self.path} ({exc.strerror or exc})"
        return None
