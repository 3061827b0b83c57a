"""All NetCDF reading and writing goes through here, under one process-wide lock.

The netCDF4/HDF5 libraries are not thread-safe, and Prefect's default task
runner uses threads, so every open/read/write holds ``NC_LOCK``.  This is a
plain module (no Prefect objects), so flows that import it stay picklable.
"""

from __future__ import annotations

import threading
from pathlib import Path

import xarray as xr

from ..files import atomic_path

# xarray's to_netcdf asks dask for its scheduler, which imports dask.distributed on first use.
# Two task threads doing that first import at once can see a half-initialised module
# ("module 'dask' has no attribute 'utils'", seen in the crash tests), so it is imported here,
# once, when this module is imported (before any task thread starts).
try:
    import dask.base  # noqa: F401
    import distributed  # noqa: F401
except ImportError:        # dask is optional for xarray; without it there is nothing to import
    pass

NC_LOCK = threading.RLock()


def write_dataset_atomic(ds: xr.Dataset, final: str | Path, encoding: dict | None = None) -> Path:
    """Write ``ds`` to NetCDF-4 at ``final`` via a temporary file and a rename."""
    final = Path(final)
    with NC_LOCK:
        with atomic_path(final) as tmp:
            try:
                ds.to_netcdf(tmp, format="NETCDF4", engine="netcdf4", encoding=encoding or {})
            except RuntimeError as err:          # the netCDF library reports a full disk as "HDF error"
                import shutil

                if shutil.disk_usage(final.parent).free < 16 * 1024 * 1024:
                    raise OSError(28, "No space left on device") from err
                raise
    return final


def read_dataset(path: str | Path, **kwargs) -> xr.Dataset:
    """Open, load fully into memory and close a NetCDF file (so no handle outlives the lock)."""
    with NC_LOCK:
        with xr.open_dataset(path, engine="netcdf4", **kwargs) as ds:
            return ds.load()


def read_attrs(path: str | Path) -> dict:
    """Global attributes of a NetCDF file (read under the lock)."""
    import netCDF4

    with NC_LOCK:
        with netCDF4.Dataset(path) as nc:
            return {k: nc.getncattr(k) for k in nc.ncattrs()}
