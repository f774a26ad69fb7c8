"""Folder listing for the app's own folder picker (big rows instead of a desktop file dialog)."""

from __future__ import annotations

from pathlib import Path


def listing(path, suffixes: tuple[str, ...] = ()) -> list[dict]:
    """Sub-folders of ``path`` (then files ending in ``suffixes``), sorted, hidden ones left out.

    Each entry: ``{"name", "path", "is_dir"}``. An unreadable folder gives an empty list.
    """
    p = Path(path)
    try:
        children = sorted(p.iterdir(), key=lambda c: c.name.lower())
    except OSError:
        return []
    out = []
    for c in children:
        if c.name.startswith("."):
            continue
        try:
            is_dir = c.is_dir()
        except OSError:
            continue
        if is_dir or (suffixes and c.name.lower().endswith(suffixes)):
            out.append({"name": c.name, "path": str(c), "is_dir": is_dir})
    return sorted(out, key=lambda e: (not e["is_dir"], e["name"].lower()))


def parent(path) -> str:
    p = Path(path).resolve()
    return str(p.parent if p.parent != p else p)
