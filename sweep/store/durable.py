"""Durable writes: what must reach the disk before a task, a record or a store counts as written.

A rename or a write survives a crash of the process as soon as it returns, but survives a
crash of the machine only once the file's data and the directory entry naming it are on
disk: an fsync of the file, and of every directory in which an entry was created or renamed.
"""

from __future__ import annotations

import os
from pathlib import Path


def fsync(path: str | Path) -> None:
    """fsync one file or directory (its contents, or its entries)."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def fsync_tree(folder: Path) -> None:
    """fsync every file and directory under ``folder``, and ``folder`` itself, deepest first."""
    for root, dirs, files in os.walk(folder, topdown=False):
        for name in files:
            fsync(os.path.join(root, name))
        fsync(root)


def inside(path: Path, root: Path) -> bool:
    """True when ``path`` resolves inside ``root`` without leaving it through a symlink.

    Both are resolved; a folder replaced by a symlink pointing elsewhere resolves outside.
    """
    real_root = os.path.realpath(root)
    real = os.path.realpath(path)
    return real == real_root or real.startswith(real_root + os.sep)
