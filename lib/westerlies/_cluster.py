"""The dask.distributed client that dask would use now, for work handed to the workers
directly (opening member files, drawing figures) rather than through a dask graph."""

from __future__ import annotations


def active_client():
    """The active dask.distributed Client, or None (dask's threads, or distributed absent)."""
    import dask.base

    owner = getattr(dask.base.get_scheduler(), "__self__", None)
    try:
        from distributed import Client
    except ImportError:
        return None
    return owner if isinstance(owner, Client) else None
