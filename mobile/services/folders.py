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


def shared_documents() -> str:
    """The platform's shared documents folder (where the office can reach the files), through
    plyer's storage paths; ``~/Documents`` when the platform does not say."""
    try:
        from plyer import storagepath

        found = storagepath.get_documents_dir()
    except Exception:  # noqa: BLE001 - any platform without the facade: the usual place
        found = None
    return str(found or Path.home() / "Documents")


_BAD_NAME = set('/\\:*?"<>|\x00')


def make_folder(parent, name: str) -> tuple[bool, str]:
    """Create folder ``name`` inside ``parent``: ``(True, path)`` or ``(False, why)``."""
    name = (name or "").strip()
    if not name:
        return False, "Type a name for the new folder first"
    if name.startswith(".") or any(c in _BAD_NAME for c in name) or len(name) > 80:
        return False, (f"'{name[:40]}' cannot be a folder name: use letters, digits, spaces, - or _ "
                       "(no / \\ : * ? \" < > |, not starting with a dot)")
    target = Path(parent) / name
    if target.exists():
        return (True, str(target)) if target.is_dir() else (False, f"'{name}' exists and is a file")
    try:
        target.mkdir(parents=False)
    except OSError as exc:
        return False, f"Could not make the folder '{name}' in {parent}: {exc.strerror or exc}"
    return True, str(target)
