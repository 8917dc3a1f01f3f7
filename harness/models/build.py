"""Writing generated models to disk: one folder per model, named by a hash of its content.

Writing is separate from generating (generators are pure), and a folder that exists is never
rewritten, so a cache of built models is safe to share between runs and processes.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import tempfile
from pathlib import Path

from .urdf import safe_name

__all__ = ["content_key", "materialise"]

URDF_NAME = "model.urdf"


def content_key(urdf, files):
    """First 12 hex digits of SHA-256 over the URDF text and the extra files (names and bytes)."""
    h = hashlib.sha256(urdf.encode())
    for name in sorted(files):
        h.update(name.encode() + b"\0" + hashlib.sha256(files[name]).digest())
    return h.hexdigest()[:12]


def materialise(name, urdf, files, root):
    """Write `urdf` and `files` under root/<name>-<key>/ unless there already; return the URDF path.

    The folder is filled under a temporary name and renamed into place, so a reader never sees
    a half-written model (rename is atomic on one file system).
    """
    folder = Path(root) / f"{safe_name(name)}-{content_key(urdf, files)}"
    if (folder / URDF_NAME).is_file():
        return folder / URDF_NAME
    Path(root).mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=".building-", dir=root))
    try:
        (tmp / URDF_NAME).write_text(urdf)
        for rel, data in files.items():
            (tmp / rel).parent.mkdir(parents=True, exist_ok=True)
            (tmp / rel).write_bytes(data)
        try:
            os.rename(tmp, folder)
        except OSError:  # another process wrote the same content first
            if not (folder / URDF_NAME).is_file():
                raise
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return folder / URDF_NAME
