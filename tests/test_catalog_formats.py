"""Every catalogue format the README names reads back the same galaxies (issue 13, item 10).

The writers are astropy's (FITS, HDF5 through h5py, ECSV, Parquet through pyarrow and pandas)
and numpy's (.npz): a round trip through each must give the positions bit for bit.
"""

from __future__ import annotations

import numpy as np
import pytest
from astropy.table import Table

from conecheck.catalog import read_galaxy_box


def _table(n: int = 50) -> Table:
    rng = np.random.default_rng(3)
    cols = {c: rng.uniform(0, 100.0, n) for c in ("x", "y", "z")}
    cols.update({c: rng.normal(0, 300.0, n) for c in ("vx", "vy", "vz")})
    cols["abs_mag"] = rng.uniform(-22.0, -19.0, n)
    return Table(cols)


@pytest.mark.parametrize("suffix", [".fits", ".hdf5", ".ecsv", ".parquet", ".npz"])
def test_each_format_round_trips(tmp_path, suffix):
    t = _table()
    path = tmp_path / f"box{suffix}"
    if suffix == ".npz":
        np.savez(path, **{c: np.asarray(t[c]) for c in t.colnames})
    elif suffix == ".hdf5":
        t.write(path, path="galaxies", serialize_meta=False)
    else:
        t.write(path)
    box = read_galaxy_box(path, None, 100.0, 0.05, require_magnitudes=True)
    assert len(box) == len(t)
    np.testing.assert_array_equal(box.position[:, 0], np.asarray(t["x"]))
    np.testing.assert_array_equal(box.abs_mag, np.asarray(t["abs_mag"]))
