"""All netCDF input and output (the only module that touches netCDF4 files).

Writes are atomic: the Dataset goes to a temporary file in the destination folder which is
renamed over the final name only once complete, so a crash or an interrupt leaves either
the old file, the new file, or nothing, never a half-written file under the final name.
"""

from __future__ import annotations

import contextlib
import os
import sys
import tempfile
from pathlib import Path

import numpy as np
import xarray as xr

from ._config import Config, config_from_toml
from ._errors import CrossflockError, InputError
from ._version import FORMAT_VERSION

__all__ = ["write_dataset", "read_dataset", "dataset_config", "check_writable",
           "atomic_write_text", "atomic_path", "ensure_dir", "status"]


def status(msg: str) -> None:
    """A one-line progress message on stderr (stdout carries results)."""
    print(f"crossflock: {msg}", file=sys.stderr, flush=True)


def ensure_dir(path) -> Path:
    """Create an output folder (refusing a file in its place)."""
    path = Path(path)
    if path.exists() and not path.is_dir():
        raise InputError(f"output {str(path)!r} exists and is not a directory")
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create output folder {str(path)!r}: {exc.strerror}") from None
    return path


def check_writable(path) -> Path:
    """Refuse up front an output path whose folder is missing or not writable."""
    path = Path(path)
    parent = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise InputError(f"output {str(path)!r} is a directory; give a file name")
    if not parent.exists():
        raise InputError(f"output folder {str(parent)!r} does not exist")
    if not parent.is_dir():
        raise InputError(f"output folder {str(parent)!r} is not a directory")
    if not os.access(parent, os.W_OK):
        raise InputError(f"output folder {str(parent)!r} is not writable")
    return path


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_path(path, suffix=".tmp"):
    """Yield a temporary path next to ``path``; rename it to ``path`` on success."""
    path = check_writable(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=suffix, dir=path.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; outputs are ordinary files
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


def atomic_write_text(path, text: str) -> Path:
    """Write a text file atomically."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)


def _encoding(ds: xr.Dataset) -> dict:
    enc = {}
    for name in ds.variables:
        var = ds[name]
        if name in ds.coords:
            enc[name] = {"_FillValue": None}
        elif np.issubdtype(var.dtype, np.floating):
            enc[name] = {"zlib": True, "complevel": 1}
    return enc


def write_dataset(ds: xr.Dataset, path) -> Path:
    """Write ``ds`` to netCDF4 at ``path`` atomically.

    Raises
    ------
    InputError
        When the folder is missing or not writable, or the disk is full.
    """
    path = Path(path)
    try:
        with atomic_path(path, suffix=".nc") as tmp:
            ds.to_netcdf(tmp, engine="netcdf4", encoding=_encoding(ds))
    except OSError as exc:
        raise InputError(f"cannot write {str(path)!r}: {exc.strerror or exc}") from None
    return path


def read_dataset(path, kind=None) -> xr.Dataset:
    """Read a crossflock netCDF file fully into memory.

    Parameters
    ----------
    path : str or Path
    kind : str or tuple of str, optional
        Accepted ``crossflock_kind`` values ("particles", "fields", "observables", ...).

    Raises
    ------
    InputError
        Missing file, directory, not netCDF, not written by crossflock, wrong kind, or a
        format version this crossflock cannot read.
    """
    path = Path(path)
    if not path.exists():
        raise InputError(f"file {str(path)!r} does not exist")
    if path.is_dir():
        raise InputError(f"{str(path)!r} is a directory, not a netCDF file")
    if path.stat().st_size == 0:
        raise InputError(f"file {str(path)!r} is empty")
    try:
        with xr.open_dataset(path, engine="netcdf4") as ds:
            ds = ds.load()
    except CrossflockError:
        raise
    except Exception as exc:  # netCDF4/HDF5 raise many types for corrupt files
        raise InputError(
            f"file {str(path)!r} is not a readable netCDF file ({type(exc).__name__})"
        ) from None
    if "crossflock_kind" not in ds.attrs or "crossflock_version" not in ds.attrs:
        raise InputError(f"file {str(path)!r} was not written by crossflock")
    fmt = ds.attrs.get("crossflock_format")
    try:
        fmt = int(fmt)
    except (TypeError, ValueError):
        fmt = None
    if fmt != FORMAT_VERSION:
        raise InputError(
            f"file {str(path)!r} has output format {fmt!r}; this crossflock reads format "
            f"{FORMAT_VERSION} (re-create it with this version)"
        )
    if kind is not None:
        kinds = (kind,) if isinstance(kind, str) else tuple(kind)
        if ds.attrs["crossflock_kind"] not in kinds:
            raise InputError(
                f"file {str(path)!r} holds {ds.attrs['crossflock_kind']!r} data; "
                f"expected {' or '.join(repr(k) for k in kinds)}"
            )
    ds.encoding["source"] = str(path)
    return ds


def dataset_config(ds: xr.Dataset) -> Config:
    """The resolved config embedded in a crossflock Dataset."""
    text = ds.attrs.get("config")
    if not text:
        raise InputError("dataset carries no embedded config")
    return config_from_toml(str(text), where=f"config of {ds.encoding.get('source', 'dataset')}")
