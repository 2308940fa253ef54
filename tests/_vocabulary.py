"""The words users see: the team vocabulary beside the repository plus the project's additions.

The team file is ``../shared/VOCABULARY.md`` relative to the repository root (CI lays a copy
there); the additions live in ``docs/VOCABULARY-ADDITIONS.md``.  No absolute machine paths.
"""

from __future__ import annotations

from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
SHARED = ROOT.parent / "shared" / "VOCABULARY.md"
ADDITIONS = ROOT / "docs" / "VOCABULARY-ADDITIONS.md"


def shared_text() -> str | None:
    """The team vocabulary, or None where the shared folder is not beside the repository."""
    return SHARED.read_text(encoding="utf-8") if SHARED.is_file() else None


def all_text() -> str:
    """Team vocabulary (when present) and the project's additions, one text."""
    return (shared_text() or "") + "\n" + ADDITIONS.read_text(encoding="utf-8")
