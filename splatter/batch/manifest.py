"""``vary.json``: every variation of a batch, what it was, what it did and what it wrote.

The manifest is rewritten (atomically) each time a variation finishes, so
after an interruption it still says which variations are complete. A re-run
skips a variation only when the manifest says it finished, its look digest
is unchanged and every file it listed is still there at the recorded size.

Examples
--------
>>> entry = {"folder": "seed1", "digest": "ab", "status": "done", "files": []}
>>> is_finished(entry, "ab", "/nonexistent"), is_finished(entry, "cd", "/nonexistent")
(True, False)
"""

from __future__ import annotations

import json
import os
from typing import Any, Dict, List, Optional

from splatter.deliver.fileio import atomic_write_text

__all__ = ["MANIFEST_FILE", "FORMAT", "read_manifest", "write_manifest", "is_finished", "entry_for"]

MANIFEST_FILE = "vary.json"
FORMAT = "splatter-vary/1"
"""The manifest's ``format`` field; bumped when a field changes meaning."""


def read_manifest(out_dir: str) -> Optional[Dict[str, Any]]:
    """The manifest in ``out_dir``, or None when there is none (or it is not one of ours)."""
    path = os.path.join(out_dir, MANIFEST_FILE)
    try:
        with open(path, encoding="utf-8") as f:
            data = json.load(f)
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("format") != FORMAT or not isinstance(data.get("variations"), list):
        return None
    return data


def write_manifest(out_dir: str, manifest: Dict[str, Any]) -> str:
    """Write ``vary.json`` atomically; returns its path."""
    return atomic_write_text(os.path.join(out_dir, MANIFEST_FILE), json.dumps(manifest, indent=2) + "\n")


def is_finished(entry: Dict[str, Any], digest: str, out_dir: str) -> bool:
    """True when ``entry`` finished with this ``digest`` and its files are all there, full size."""
    if entry.get("status") != "done" or entry.get("digest") != digest:
        return False
    for item in entry.get("files", []):
        try:
            if os.path.getsize(os.path.join(out_dir, item["path"])) != item["bytes"]:
                return False
        except (OSError, KeyError, TypeError):
            return False
    return True


def entry_for(variation, status: str = "pending") -> Dict[str, Any]:
    """A fresh manifest entry for a :class:`~splatter.batch.plan.Variation`."""
    return {
        "name": variation.name,
        "folder": variation.name,
        "seed": variation.seed,
        "overrides": dict(variation.varied),
        "sets": list(variation.sets),
        "digest": variation.digest,
        "status": status,
        "message": None,
        "files": [],
        "seconds": None,
        "warnings": [],
    }


def file_records(paths: List[str], out_dir: str) -> List[Dict[str, Any]]:
    """``{"path": relative to out_dir, "bytes": size}`` for each written file."""
    return [{"path": os.path.relpath(p, out_dir).replace(os.sep, "/"), "bytes": os.path.getsize(p)} for p in paths]
