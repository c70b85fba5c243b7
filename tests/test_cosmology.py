"""Cosmology against astropy (reference library) and Hogg 1999."""

import numpy as np
import pytest
from astropy.cosmology import FlatLambdaCDM, LambdaCDM
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.interpolate import CubicSpline

from conecheck.cosmology import Cosmology, TabulatedCubic
from conecheck.errors import InputError

Z = np.linspace(0.001, 3.0, 200)


def test_comoving_distance_matches_astropy():
    # Reference: astropy.cosmology.FlatLambdaCDM with H0 = 100 gives Mpc/h.
    ref = FlatLambdaCDM(H0=100, Om0=0.3, Tcmb0=0)
    c = Cosmology(omega_m=0.3)
    np.testing.assert_allclose(c.comoving_distance(Z), ref.comoving_distance(Z).value, rtol=1e-6)
    np.testing.assert_allclose(c.luminosity_distance(Z), ref.luminosity_distance(Z).value,
                               rtol=1e-6)
    # distance modulus with D_L in Mpc/h equals astropy's distmod for H0 = 100
    np.testing.assert_allclose(c.distance_modulus(Z), ref.distmod(Z).value, atol=1e-6)


def test_shell_volume_matches_astropy():
    ref = FlatLambdaCDM(H0=100, Om0=0.3, Tcmb0=0)
    c = Cosmology(omega_m=0.3)
    v = c.shell_volume(0.1, 0.5, 41252.96124941928)
    v_ref = (ref.comoving_volume(0.5) - ref.comoving_volume(0.1)).value
    assert v == pytest.approx(v_ref, rel=1e-6)


def test_curved_matches_astropy():
    ref = LambdaCDM(H0=100, Om0=0.3, Ode0=0.6, Tcmb0=0)
    c = Cosmology(omega_m=0.3, omega_k=0.1)
    np.testing.assert_allclose(c.transverse_comoving_distance(Z),
                               ref.comoving_transverse_distance(Z).value, rtol=1e-6)
    v = c.shell_volume(0.2, 1.0, 1000.0)
    v_ref = (ref.comoving_volume(1.0) - ref.comoving_volume(0.2)).value * 1000.0 / 41252.96124941928
    assert v == pytest.approx(v_ref, rel=1e-6)


def test_hogg_einstein_de_sitter_worked_value():
    # Hogg 1999 (astro-ph/9905116), eq. for Ω_M = 1: D_C = 2 D_H (1 − 1/sqrt(1+z)).
    c = Cosmology(omega_m=1.0)
    z = np.array([0.5, 1.0, 3.0])
    np.testing.assert_allclose(c.comoving_distance(z),
                               2 * 2997.92458 * (1 - 1 / np.sqrt(1 + z)), rtol=1e-7)


def test_growth_rate_einstein_de_sitter_and_linder():
    # EdS: f = 1 exactly; ΛCDM: f ≈ Ω_m(z)^0.55 to <1 % (Linder 2005, PRD 72, 043529).
    assert Cosmology(omega_m=1.0).growth_rate(0.5) == pytest.approx(1.0, rel=1e-6)
    c = Cosmology(omega_m=0.3)
    for z in (0.0, 0.5, 1.0):
        assert c.growth_rate(z) == pytest.approx(c.omega_m_z(z) ** 0.55, rel=1e-2)


@settings(max_examples=200, deadline=None)
@given(st.floats(0.0, 3.0))
def test_redshift_round_trip(z):
    c = Cosmology(omega_m=0.31)
    assert float(c.redshift_at(c.comoving_distance(z))) == pytest.approx(z, abs=1e-6)


def test_bad_values():
    with pytest.raises(InputError, match="omega_m"):
        Cosmology(omega_m=-0.1)
    with pytest.raises(InputError):
        Cosmology().comoving_distance(-1.0)


def test_ci_runs_readme_test_command_verbatim():
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    readme = (root / "README.md").read_text()
    blocks = [b.split("```", 1)[0].strip() for b in readme.split("```bash\n")[1:]]
    test_cmd = [b for b in blocks if "pytest" in b][0]
    assert test_cmd in (root / ".ci" / "run").read_text().splitlines()


def test_astropy_cosmologies_are_accepted_from_python_and_by_name(tmp_path):
    """An astropy object, or a realisation's name, sets Ω_m, Ω_k and h.

    Reference: astropy's Planck18 (radiation and massive neutrinos left out here, so the
    comoving distance agrees to 6·10⁻⁴ up to z = 0.5, measured against astropy).
    """
    from astropy.cosmology import WMAP9, Planck18
    from run_helpers import tiny_dict

    from conecheck.config import config_from_dict, load_config, resolved_toml

    c = Cosmology.from_astropy(Planck18)
    assert c.h == pytest.approx(Planck18.H0.value / 100) and c.omega_m == Planck18.Om0
    z = np.array([0.05, 0.2, 0.5])
    ref = Planck18.comoving_distance(z).value * Planck18.h
    np.testing.assert_allclose(c.comoving_distance(z), ref, rtol=6e-4)
    d = tiny_dict()
    d["cosmology"] = WMAP9
    cfg = config_from_dict(d, "py", tmp_path)
    assert cfg.cosmology.omega_m == WMAP9.Om0 and cfg.cosmology.realisation == "WMAP9"
    d["cosmology"] = {"realisation": "Planck18"}
    cfg = config_from_dict(d, "named", tmp_path)
    assert cfg.cosmology.h == pytest.approx(0.6766)
    path = tmp_path / "resolved.toml"  # the resolved file repeats the values: it loads again
    path.write_text(resolved_toml(cfg), encoding="utf-8")
    assert load_config(path).cosmology == cfg.cosmology
    d["cosmology"] = {"realisation": "Planck18", "omega_m": 0.25}
    with pytest.raises(InputError, match=r"cosmology.realisation = 'Planck18' sets .*"
                                         r"remove cosmology.omega_m"):
        config_from_dict(d, "both", tmp_path)
    d["cosmology"] = {"realisation": "Planck99"}
    with pytest.raises(InputError, match=r"realisation = 'Planck99': expected one of"):
        config_from_dict(d, "unknown", tmp_path)


def test_volumes_and_randoms_follow_the_curved_volume_law():
    """With curvature the shell volume is ∫ D_M² dχ, and randoms follow it radially.

    Reference: astropy's LambdaCDM comoving volume (Ω_k = 0.3, as an open universe) for the
    volume; a Kolmogorov–Smirnov test (scipy) of 200 000 randoms' χ against the volume
    law, p > 10⁻³ (a false alarm one time in a thousand), where the flat law is rejected.
    """
    from scipy import stats as sps

    from conecheck.cone.randoms import make_randoms

    c = Cosmology(omega_m=0.3, omega_k=0.3, h=0.7)
    ref = LambdaCDM(H0=100, Om0=0.3, Ode0=0.4, Tcmb0=0)
    z0, z1 = 0.2, 1.5
    want = (ref.comoving_volume(z1) - ref.comoving_volume(z0)).value / (4 * np.pi)
    assert float(c.shell_volume_per_sr(z0, z1)) == pytest.approx(want, rel=1e-6)
    lo, hi = float(c.comoving_distance(z0)), float(c.comoving_distance(z1))
    chi = np.asarray(make_randoms(None, lo, hi, 200_000, np.random.default_rng(4),
                                  cosmology=c)["chi_obs"])
    total = float(c.volume_between_distances_per_sr(lo, hi))
    grid = np.linspace(lo, hi, 4001)
    cdf_grid = np.concatenate([[0.0], c.volume_between_distances_per_sr(
        np.full(4000, lo), grid[1:])]) / total

    def curved(x):
        return np.interp(x, grid, cdf_grid)

    def flat(x):
        return (x**3 - lo**3) / (hi**3 - lo**3)

    assert sps.kstest(chi, curved).pvalue > 1e-3
    assert sps.kstest(chi, flat).pvalue < 1e-6


@pytest.mark.parametrize("omega_k", [0.0, 0.2])
def test_tabulated_cubic_equals_scipys_cubic_spline(omega_k):
    """The distance tables' fast evaluation against the scipy CubicSpline it wraps
    (reference library): random values, every knot and its floating-point neighbours (the
    interval choice), values beyond both ends (the end pieces extended), NaN, any shape.
    The arithmetic is scipy's, so with scipy 1.17 they agree bit for bit; the margin (a few
    rounding errors) only leaves room for another scipy's order of operations."""
    c = Cosmology(omega_m=0.3, omega_k=omega_k, z_max_table=4.0)
    rng = np.random.default_rng(11)
    for table in (c._chi_spline, c._z_spline):
        k = table.knots
        v = np.concatenate([rng.uniform(k[0], k[-1], 200_000), k, np.nextafter(k, -np.inf),
                            np.nextafter(k, np.inf), [k[0] - 1.0, k[-1] + 7.0, np.nan]])
        got, ref = table(v), table.spline(v)
        scale = np.nanmax(np.abs(ref))
        np.testing.assert_allclose(got, ref, rtol=4e-16, atol=4e-16 * scale, equal_nan=True)
        assert np.isnan(got[-1])
        grid = rng.uniform(k[0], k[-1], (3, 5))
        assert table(grid).shape == (3, 5) and np.shape(table(0.5 * k[-1])) == ()
    # rough splines, where a piece used one interval off is far off: uneven knots, and even
    # ones that fall on the look-up bins' edges, probed on both sides of every knot
    # knots on the bins' edges (computed as the table computes them), where rounding can
    # put a value just below a knot into the bin that starts at it
    n, lo, hi = 200, 0.3, 8.07
    edges = lo + np.arange(4 * n) / (4 * n / (hi - lo))
    on_edges = np.concatenate([[lo], edges[3:-3:4][:n - 2], [hi]])
    for knots in (np.cumsum(rng.uniform(0.01, 1.0, 300)), 0.1 * np.arange(300), on_edges):
        rough = TabulatedCubic(CubicSpline(knots, rng.normal(size=len(knots))))
        v = np.concatenate([rng.uniform(knots[0] - 0.5, knots[-1] + 0.5, 100_000), knots,
                            np.nextafter(knots, -np.inf), np.nextafter(knots, np.inf)])
        np.testing.assert_allclose(rough(v), rough.spline(v), rtol=1e-13, atol=1e-13)
        # the piece of every value is the one of the knots' rule (numpy's searchsorted)
        expected = np.clip(np.searchsorted(knots, v, side="right") - 1, 0, len(knots) - 2)
        np.testing.assert_array_equal(rough.intervals(v), expected)
