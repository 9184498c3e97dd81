"""Small file helpers shared by the writers: permissions of temporary files made public."""

from __future__ import annotations

import os
from pathlib import Path


def _umask() -> int:
    current = os.umask(0)
    os.umask(current)
    return current


def publish_mode(path: str | os.PathLike, directory: bool = False) -> None:
    """Give a file or directory made by `tempfile` (private, 0600/0700) the usual permissions.

    tempfile creates private entries; a figure set is meant to be read by others like any file
    the user writes, so the mode becomes 0666 (files) or 0777 (directories) less the umask.
    """
    os.chmod(Path(path), (0o777 if directory else 0o666) & ~_umask())
