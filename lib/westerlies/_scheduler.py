"""Which dask scheduler the work runs on."""

from __future__ import annotations


def cluster_client():
    """The dask.distributed client dask would use now, or None (threads, or no distributed)."""
    import dask.base

    get = dask.base.get_scheduler()
    owner = getattr(get, "__self__", None)
    try:
        from distributed import Client
    except ImportError:
        return None
    return owner if isinstance(owner, Client) else None
