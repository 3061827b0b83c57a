"""All NetCDF reading and writing goes through here, under one process-wide lock.

The netCDF4/HDF5 libraries are not thread-safe, and Prefect's default task
runner uses threads, so every open/read/write holds ``NC_LOCK``.  This is a
plain module (no Prefect objects), so flows that import it stay picklable.
"""

from __future__ import annotations

import contextlib
import errno
import threading
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..files import atomic_path

if TYPE_CHECKING:
    import xarray

NC_LOCK = threading.RLock()


def xarray_module():
    """xarray, imported on first use (reading a file's attributes needs only netCDF4), with dask's
    distributed module.

    xarray's to_netcdf asks dask for its scheduler, which imports dask.distributed on first use.
    Two task threads doing that first import at once can see a half-initialised module
    ("module 'dask' has no attribute 'utils'", seen in the crash tests), so it is imported here,
    once: under ``NC_LOCK`` by every reader and writer below, and by a runner that starts task
    threads before it starts them (``pipeline.run.import_steps``).
    """
    import xarray

    try:
        import dask.base  # noqa: F401
        import distributed  # noqa: F401
    except ImportError:    # dask is optional for xarray; without it there is nothing to import
        pass
    return xarray


def write_dataset_atomic(ds: xarray.Dataset, final: str | Path, encoding: dict | None = None) -> Path:
    """Write ``ds`` to NetCDF-4 at ``final`` via a temporary file and a rename."""
    final = Path(final)
    with NC_LOCK:
        xarray_module()
        with atomic_path(final) as tmp, _full_disk_as_oserror(final):
            ds.to_netcdf(tmp, format="NETCDF4", engine="netcdf4", encoding=encoding or {})
    return final


@contextlib.contextmanager
def _full_disk_as_oserror(final: Path):
    """The netCDF library reports a full disk as a RuntimeError ("HDF error"): with less than 16 MB left
    beside ``final`` it becomes ``OSError(ENOSPC)``, which :func:`qcpipe.files.atomic_path` turns into
    the one-line "disk full while writing ..."."""
    try:
        yield
    except RuntimeError as err:
        import shutil

        if shutil.disk_usage(final.parent).free < 16 * 1024 * 1024:
            raise OSError(errno.ENOSPC, "No space left on device") from err
        raise


#: the time variable of a file written by ``write_columns_atomic``: what xarray writes for datetime64[ns]
#: times with the encoding {"units": "seconds since 1970-01-01T00:00:00Z", "dtype": "float64"}
COLUMN_TIME_UNITS = "seconds since 1970-01-01T00:00:00+00:00"
COLUMN_TIME_CALENDAR = "proleptic_gregorian"


def write_columns_atomic(final: str | Path, time: np.ndarray, columns: dict[str, tuple[np.ndarray, dict]],
                         attrs: dict, *, block: int = 1 << 20) -> Path:
    """Write one ``time`` dimension and its columns to NetCDF-4 at ``final`` slice by slice (so memory
    stays one block whatever the length), via a temporary file and a rename.

    The file is the one ``xarray.Dataset.to_netcdf`` writes for ``time`` (datetime64[ns]) encoded as
    float64 seconds since 1970 UTC and each column with ``{"zlib": True, "complevel": 4}``: time
    contiguous with ``_FillValue`` NaN, ``units`` and ``calendar``; columns deflated at level 4 with
    shuffle in netCDF's default chunks, float columns with ``_FillValue`` NaN, then their ``attrs``
    (tests/ingest/test_chunked_read.py compares the demo's stores with the recorded digest).
    """
    import netCDF4

    final = Path(final)
    ns = np.asarray(time, dtype="datetime64[ns]").view(np.int64)
    with NC_LOCK, atomic_path(final) as tmp, _full_disk_as_oserror(final):
        with netCDF4.Dataset(tmp, "w", format="NETCDF4") as nc:
            nc.createDimension("time", ns.size)
            out = {}
            for name, (values, var_attrs) in columns.items():
                fill = np.nan if values.dtype.kind == "f" else False
                out[name] = nc.createVariable(name, values.dtype, ("time",), zlib=True, complevel=4, shuffle=True,
                                              fill_value=fill)
                for key, value in var_attrs.items():
                    out[name].setncattr(key, value)
            tv = nc.createVariable("time", "f8", ("time",), fill_value=np.nan, contiguous=True)
            tv.setncattr("units", COLUMN_TIME_UNITS)
            tv.setncattr("calendar", COLUMN_TIME_CALENDAR)
            for key, value in attrs.items():
                nc.setncattr(key, value)
            for a in range(0, ns.size, block):
                tv[a:a + block] = ns[a:a + block] / 1e9
            for name, (values, _) in columns.items():
                # whole chunks, one variable at a time, through no chunk cache: each chunk is deflated and
                # written as it is filled instead of every variable's chunks waiting in a cache
                var = out[name]
                var.set_var_chunk_cache(size=0, nelems=1, preemption=1.0)
                step = (var.chunking() or [block])[0] if var.chunking() != "contiguous" else block
                for a in range(0, ns.size, step):
                    var[a:a + step] = values[a:a + step]
    return final


def read_dataset(path: str | Path, **kwargs) -> xarray.Dataset:
    """Open, load fully into memory and close a NetCDF file (so no handle outlives the lock)."""
    with NC_LOCK:
        with xarray_module().open_dataset(path, engine="netcdf4", **kwargs) as ds:
            return ds.load()


def read_attrs(path: str | Path) -> dict:
    """Global attributes of a NetCDF file (read under the lock)."""
    import netCDF4

    with NC_LOCK:
        with netCDF4.Dataset(path) as nc:
            return {k: nc.getncattr(k) for k in nc.ncattrs()}


def read_series_blocks(path: str | Path, variable: str, block: int):
    """Blocks of ``block`` samples of (time datetime64[ns], variable float64) from a NetCDF file,
    read slice by slice (under the lock for each slice)."""
    import netCDF4

    with NC_LOCK:
        nc = netCDF4.Dataset(path)
    try:
        tv, vv = nc["time"], nc[variable]
        n = tv.shape[0]
        scale = _ns_per_unit(tv.units)
        epoch = _epoch_ns(tv.units)
        for a in range(0, n, block):
            with NC_LOCK:
                t = np.asarray(tv[a:a + block], dtype=np.float64)
                v = np.ma.filled(vv[a:a + block].astype(np.float64), np.nan)
            yield (epoch + np.rint(t * scale).astype(np.int64)).astype("datetime64[ns]"), v
    finally:
        with NC_LOCK:
            nc.close()


def _ns_per_unit(units: str) -> float:
    word = units.split()[0].lower()
    return {"seconds": 1e9, "second": 1e9, "s": 1e9, "minutes": 60e9, "hours": 3600e9, "days": 86400e9}[word]


def _epoch_ns(units: str) -> np.int64:
    ref = units.split("since", 1)[1].strip().replace("Z", "").replace("+00:00", "")
    return np.datetime64(ref.replace(" ", "T"), "ns").astype(np.int64)


class SeriesWriter:
    """A time series and its int8 flag variables written slice by slice along an unlimited time
    dimension, into a temporary file renamed into place when the ``with`` block ends without error."""

    def __init__(self, final: str | Path, variable: str):
        self.final, self.variable = Path(final), variable

    def __enter__(self) -> SeriesWriter:
        import netCDF4

        self._atomic = atomic_path(self.final)
        tmp = self._atomic.__enter__()
        with NC_LOCK:
            self._nc = dst = netCDF4.Dataset(tmp, "w", format="NETCDF4")
            dst.createDimension("time", None)
            self._time = dst.createVariable("time", "f8", ("time",), chunksizes=(65536,))
            self._time.units = "seconds since 1970-01-01T00:00:00Z"
            self._time.standard_name = "time"
            self._values = dst.createVariable(self.variable, "f8", ("time",), zlib=True, complevel=4,
                                              chunksizes=(65536,), fill_value=np.nan)
        self._flags: dict = {}
        self._n = 0
        return self

    def append(self, times, values, flags: dict[str, np.ndarray]) -> None:
        """Append samples (datetime64[ns] times, values) and their flags by check name."""
        n, m = self._n, len(times)
        with NC_LOCK:
            for check, f in flags.items():
                if check not in self._flags:
                    self._flags[check] = self._nc.createVariable(f"{self.variable}_qc_{check}", "i1", ("time",),
                                                                 zlib=True, complevel=4, chunksizes=(65536,))
                self._flags[check][n:n + m] = f
            self._time[n:n + m] = np.asarray(times, dtype="datetime64[ns]").astype(np.int64) / 1e9
            self._values[n:n + m] = values
        self._n += m

    def __exit__(self, *exc) -> bool:
        with NC_LOCK:
            self._nc.close()
        return self._atomic.__exit__(*exc)
