"""Every catalogue format the README names reads back the same galaxies (issue 13, item 10).

The writers are astropy's (FITS, HDF5 through h5py, ECSV, Parquet through pyarrow and pandas)
and numpy's (.npz): a round trip through each must give the positions bit for bit.
"""

from __future__ import annotations

import numpy as np
import pytest
from astropy.table import Table

from conecheck.catalog import read_galaxy_box
from conecheck.errors import InputError


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


def test_positions_a_hair_outside_the_box_are_wrapped_strictly_inside(tmp_path):
    """Coordinates within the wrap tolerance of the box edges come back in [0, L), as
    periodic trees (scipy's cKDTree with ``boxsize``) require: ``numpy.mod`` alone rounds
    −1e-15 up to L itself (L = 585, whose spacing of doubles is 1.1e-13)."""
    L = 585.0
    assert np.mod(-1e-15, L) == L  # the rounding this guards against
    t = _table()
    t["x"][:4] = [-1e-15, -1e-9, L, L + 1e-9]
    t["y"] = t["y"] * (L / 100.0)
    t["z"] = t["z"] * (L / 100.0)
    t.write(tmp_path / "edge.fits")
    box = read_galaxy_box(tmp_path / "edge.fits", None, L, 0.05)
    assert np.all((box.position >= 0.0) & (box.position < L))
    edge = np.array([-1e-15, -1e-9, L, L + 1e-9])
    expected = np.mod(edge, L)
    expected[expected >= L] = 0.0  # numpy.mod's value, L taken to 0
    np.testing.assert_array_equal(box.position[:4, 0], expected)
    assert box.position[0, 0] == 0.0 and box.position[2, 0] == 0.0


# --------------------------------------------------------------------------- layouts
def _vectors(n: int = 40, seed: int = 2) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    return {"pos": rng.uniform(0, 100.0, (n, 3)), "vel": rng.normal(0, 300.0, (n, 3)),
            "mag": rng.uniform(-22, -19, n)}


def test_n_by_3_columns_map_whole_or_by_component(tmp_path):
    cols = _vectors()
    t = Table(cols)
    t.meta.update(BOXSIZE=100.0, REDSHIFT=0.1)
    t.write(tmp_path / "b.fits")
    whole = read_galaxy_box(tmp_path / "b.fits", {"position": "pos", "velocity": "vel",
                                                  "abs_mag": "mag"})
    parts = read_galaxy_box(tmp_path / "b.fits", {
        **{c: f"pos[{i}]" for i, c in enumerate("xyz")},
        **{f"v{c}": f"vel[{i}]" for i, c in enumerate("xyz")}, "abs_mag": "mag"})
    np.testing.assert_array_equal(whole.position, cols["pos"])
    np.testing.assert_array_equal(parts.velocity, cols["vel"])
    with pytest.raises(InputError, match=r"'pos\[5\]'.*no component 5"):
        read_galaxy_box(tmp_path / "b.fits", {"x": "pos[5]", "y": "pos[1]", "z": "pos[2]",
                                              "velocity": "vel"})


def test_hdf5_group_of_column_datasets_and_a_chosen_path(tmp_path):
    h5py = pytest.importorskip("h5py")
    cols = _vectors()
    with h5py.File(tmp_path / "b.hdf5", "w") as f:
        f.create_dataset("header/info", data=np.arange(3))  # something that is not the box
        g = f.create_group("galaxies")
        for k, v in cols.items():
            g.create_dataset(k, data=v)
        g.attrs["BoxSize"] = 100.0
        g.attrs["Redshift"] = 0.1
    box = read_galaxy_box(tmp_path / "b.hdf5", {"position": "pos", "velocity": "vel"},
                          hdf5_path="galaxies")
    np.testing.assert_array_equal(box.position, cols["pos"])
    assert box.box_size == 100.0 and box.redshift == 0.1  # from the group's attributes
    with pytest.raises(InputError, match=r"no dataset or group 'gals'.*galaxies, header"):
        read_galaxy_box(tmp_path / "b.hdf5", hdf5_path="gals")


def test_missing_columns_name_the_files_columns_and_the_key(tmp_path):
    t = Table({"px": np.ones(3), "py": np.ones(3), "pz": np.ones(3)})
    t.meta.update(BOXSIZE=10.0, REDSHIFT=0.1)
    t.write(tmp_path / "b.fits")
    with pytest.raises(InputError, match=r"missing column\(s\) 'x', 'y', 'z', 'vx', 'vy', "
                                         r"'vz'; the file has px, py, pz; .*box\.columns"):
        read_galaxy_box(tmp_path / "b.fits")


def test_check_warns_when_the_box_header_disagrees_with_the_config():
    from run_helpers import tiny_dict

    from conecheck.config import config_from_dict
    from conecheck.run.inputs import header_disagreements

    d = tiny_dict(**{"cosmology.omega_m": 0.3})
    d["box"] = {"source": "file", "path": "b.fits", "box_size": 250.0, "redshift": 0.1}
    cfg = config_from_dict(d, "c", ".")
    notes = header_disagreements(cfg, {"BOXSIZE": 500.0, "redshift": 0.1, "Om0": 0.25})
    assert len(notes) == 2
    assert "box.box_size = 250" in notes[0] and "BOXSIZE = 500" in notes[0]
    assert "cosmology.omega_m = 0.3" in notes[1] and "OM0 = 0.25" in notes[1]
    assert header_disagreements(cfg, {"BOXSIZE": 250.0, "REDSHIFT": 0.1}) == []


def test_input_columns_with_units_are_converted_or_refused(tmp_path):
    """Mpc is converted with h, kpc/h scaled, m/s to km/s; a time is refused.

    "Mpc/h" in a file parses as megaparsec per hour in astropy; conecheck reads it as
    the trade means it (conecheck/units.py).
    """
    import astropy.units as u

    base = _table(30)
    base.meta.update(BOXSIZE=100.0, REDSHIFT=0.1)
    plain = base.copy()
    for c in ("x", "y", "z"):
        plain[c] = plain[c] / 0.7  # the same positions in Mpc (h = 0.7)
        plain[c].unit = u.Mpc
    plain["vx"] = plain["vx"] * 1000.0
    plain["vx"].unit = u.m / u.s
    plain.write(tmp_path / "mpc.fits")
    got = read_galaxy_box(tmp_path / "mpc.fits", hubble_h=0.7)
    np.testing.assert_allclose(got.position[:, 0], base["x"], rtol=1e-12)
    np.testing.assert_allclose(got.velocity[:, 0], base["vx"], rtol=1e-12)
    with pytest.raises(InputError, match=r"column 'x' is in Mpc \(no h\).*cosmology\.h"):
        read_galaxy_box(tmp_path / "mpc.fits")
    hscaled = base.copy()
    hscaled["x"].unit = "Mpc/h"  # written as the trade writes it
    hscaled["y"] = hscaled["y"] * 1000.0
    hscaled["y"].unit = "kpc/h"
    hscaled.write(tmp_path / "h.fits")
    got = read_galaxy_box(tmp_path / "h.fits")
    np.testing.assert_allclose(got.position, np.column_stack([base["x"], base["y"],
                                                               base["z"]]), rtol=1e-12)
    wrong = base.copy()
    wrong["z"].unit = u.s
    wrong.write(tmp_path / "s.fits")
    with pytest.raises(InputError, match=r"column 'z' is in s; expected Mpc/h"):
        read_galaxy_box(tmp_path / "s.fits")


def test_statistic_tables_carry_units():
    from conecheck.report.tables import statistic_table

    d = {"bins": [1.0, 2.0], "box": [3.0, 4.0], "cone_mean": [3.0, 4.0],
         "cones": [[3.0, 4.0]], "bin_label": "r_p [Mpc/h]", "value_label": "w_p(r_p) [Mpc/h]"}
    t = statistic_table(d, "s", "c", "wp")
    assert str(t["bin"].unit) == str(t["box"].unit) == str(t["cone_000"].unit) == "Mpc / h"
    assert t["z"].unit is None  # z-scores are numbers
