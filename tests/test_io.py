"""netCDF output contract, atomic writes and the reader's refusals."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from crossflock import InputError, dataset_config, load_config, read_dataset, write_dataset
from crossflock._build import field_dataset, particle_dataset
from crossflock._io import atomic_path
from tests.conftest import small_mapping


def _particles(cfg, snapshots=True):
    t = np.arange(3.0)
    rng = np.random.default_rng(1)
    kw = {}
    if snapshots:
        kw = {"x": rng.uniform(0, 16, (3, 10)), "y": rng.uniform(0, 16, (3, 10)),
              "theta": rng.uniform(-np.pi, np.pi, (3, 10))}
    return particle_dataset(cfg, t, rng.uniform(0, 1, 3), n_particles=10, **kw)


def test_config_round_trip_through_a_run_file(tmp_path):
    cfg = load_config(small_mapping(), overrides={
        "domain.obstacles": [{"center": [8.0, 8.0], "radius": 2.0}],
        "continuum.coefficients": {"alpha": 0.3, "pressure": [0.5, 0.2]},
        "continuum.dt": 0.01})
    path = write_dataset(_particles(cfg), tmp_path / "run.nc")
    back = dataset_config(read_dataset(path))
    assert back == cfg


def test_contract_attributes(tmp_path):
    cfg = load_config(small_mapping())
    ds = field_dataset(cfg, np.arange(2.0), np.arange(4.0) + 0.5, np.arange(3.0) + 0.5,
                       np.ones((2, 3, 4)), np.zeros((2, 3, 4)), np.zeros((2, 3, 4)),
                       np.zeros(2), mask=np.ones((3, 4), bool))
    path = write_dataset(ds, tmp_path / "f.nc")
    raw = xr.open_dataset(path)
    for key in ("config", "crossflock_version", "Conventions", "title", "history"):
        assert key in raw.attrs
    assert raw.attrs["Conventions"] == "CF-1.11"
    for name in raw.variables:
        assert "long_name" in raw[name].attrs and "units" in raw[name].attrs, name
    raw.close()
    import netCDF4

    with netCDF4.Dataset(path) as nc:
        for name in ("time", "x", "y"):
            assert "_FillValue" not in nc[name].ncattrs()
        assert nc["rho"].dimensions == ("time", "y", "x")


def test_reader_refuses_foreign_and_broken_files(tmp_path):
    foreign = tmp_path / "foreign.nc"
    xr.Dataset({"a": ("t", np.arange(3.0))}).to_netcdf(foreign)
    with pytest.raises(InputError, match="was not written by crossflock"):
        read_dataset(foreign)
    empty = tmp_path / "empty.nc"
    empty.write_bytes(b"")
    with pytest.raises(InputError, match="is empty"):
        read_dataset(empty)
    junk = tmp_path / "junk.nc"
    junk.write_bytes(b"not a netcdf file at all" * 10)
    with pytest.raises(InputError, match="is not a readable netCDF file"):
        read_dataset(junk)
    cfg = load_config(small_mapping())
    good = write_dataset(_particles(cfg), tmp_path / "good.nc")
    truncated = tmp_path / "truncated.nc"
    truncated.write_bytes(good.read_bytes()[: good.stat().st_size // 2])
    with pytest.raises(InputError, match="not a readable netCDF file"):
        read_dataset(truncated)
    with pytest.raises(InputError, match="is a directory"):
        read_dataset(tmp_path)
    with pytest.raises(InputError, match="does not exist"):
        read_dataset(tmp_path / "nope.nc")
    with pytest.raises(InputError, match="holds 'particles' data; expected 'fields'"):
        read_dataset(good, kind="fields")
    old = _particles(cfg)
    old.attrs["crossflock_format"] = 0
    write_dataset(old, tmp_path / "old.nc")
    with pytest.raises(InputError, match="has output format 0"):
        read_dataset(tmp_path / "old.nc")


def test_atomic_write_leaves_nothing_on_failure(tmp_path):
    target = tmp_path / "out.nc"
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("partial")
            raise RuntimeError("interrupted")
    assert list(tmp_path.iterdir()) == []
    with pytest.raises(InputError, match="does not exist"):
        write_dataset(_particles(load_config(small_mapping())), tmp_path / "no" / "x.nc")


def test_embedded_config_is_parsed_never_evaluated(tmp_path):
    cfg = load_config(small_mapping())
    ds = _particles(cfg)
    marker = tmp_path / "pwned"
    ds.attrs["config"] = f"__import__('pathlib').Path({str(marker)!r}).touch()"
    path = write_dataset(ds, tmp_path / "evil.nc")
    with pytest.raises(InputError, match="is not valid TOML"):
        dataset_config(read_dataset(path))
    assert not marker.exists()


def test_disk_full_leaves_nothing_and_says_so(tmp_path, monkeypatch):
    import errno

    cfg = load_config(small_mapping())
    ds = _particles(cfg)

    def full(self, path, *args, **kwargs):
        with open(path, "wb") as fh:  # a partial file, as a real full disk leaves
            fh.write(b"CDF\x01partial")
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(xr.Dataset, "to_netcdf", full)
    with pytest.raises(InputError, match="No space left on device"):
        write_dataset(ds, tmp_path / "out.nc")
    assert list(tmp_path.iterdir()) == []
