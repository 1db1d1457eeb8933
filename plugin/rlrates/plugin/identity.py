"""The stream identity of a test: what its checks' sample streams derive from, besides the master seed.

Normally that is the test's node id, which pytest writes relative to the rootdir.
With an ini file (or a setup script) the rootdir is that file's folder, wherever
pytest starts. Without one, pytest takes the rootdir from the arguments and the
start directory, so running one test file from its own folder and from the folder
above would give the test two ids, and two sets of numbers. Then the identity is
the test's path relative to an anchor found from the test file itself (the
nearest folder above it holding ``.git``, else the file's own folder), followed
by the rest of the node id.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

__all__ = ["stream_identity"]


def _anchor(path: Path) -> Path:
    for folder in path.parents:
        if (folder / ".git").exists():
            return folder
    return path.parent


def stream_identity(item: pytest.Item) -> str:
    """The test id the check streams of ``item`` derive from (its node id unless that depends on the start directory)."""
    config = item.config
    if config.inipath is not None or (config.rootpath / "setup.py").is_file():
        return item.nodeid
    _, sep, rest = item.nodeid.partition("::")
    path = Path(str(item.path))
    relative = os.path.relpath(path, _anchor(path)).replace(os.sep, "/")
    return relative + sep + rest
