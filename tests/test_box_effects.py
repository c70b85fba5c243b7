"""Box-side redshift-space distortions and redshift errors."""

from __future__ import annotations

import astropy.units as u
import numpy as np
import pytest
from astropy.cosmology import FlatLambdaCDM

from conecheck.box import apply_box_redshift_scatter, apply_box_rsd
from conecheck.catalog import GalaxyBox
from conecheck.cosmology import Cosmology
from conecheck.errors import InputError

COSMO = Cosmology(omega_m=0.31, h=0.68)
REF = FlatLambdaCDM(H0=100.0, Om0=0.31)   # astropy, h = 1 units: H(z) in km/s/(Mpc/h)


def one_galaxy_box(pos, vel, z=0.5, size=500.0):
    return GalaxyBox(np.array([pos], float), np.array([vel], float), size, z)


@pytest.mark.parametrize("axis", [0, 1, 2])
def test_rsd_shift_is_v_1pz_over_h(axis):
    # s = x + v (1+z) / H(z); H(z) from astropy.cosmology (reference library)
    vel = [0.0, 0.0, 0.0]
    vel[axis] = 437.0
    box = one_galaxy_box([100.0, 200.0, 300.0], vel)
    s = apply_box_rsd(box, axis, COSMO)
    h_z = REF.H(0.5).to(u.km / u.s / u.Mpc).value
    expect = box.position[0].copy()
    expect[axis] += 437.0 * 1.5 / h_z
    assert np.allclose(s[0], expect, rtol=0, atol=1e-9)
    assert np.array_equal(box.position[0], [100.0, 200.0, 300.0])   # input untouched


def test_rsd_wraps_periodically():
    box = one_galaxy_box([1.0, 499.5, 3.0], [0.0, 2000.0, -2000.0], z=0.1)
    s = apply_box_rsd(box, 1, COSMO)
    shift = 2000.0 * 1.1 / REF.H(0.1).value
    assert s[0, 1] == pytest.approx(499.5 + shift - 500.0)
    s = apply_box_rsd(box, 2, COSMO)
    assert s[0, 2] == pytest.approx(3.0 - shift + 500.0)
    assert 0 <= s.min() and s.max() < 500.0


def test_redshift_scatter_width_and_wrap():
    rng = np.random.default_rng(0)
    n = 200_000
    pos = np.full((n, 3), 250.0)
    out = apply_box_redshift_scatter(pos, 2, 60.0, 0.3, COSMO, rng, 500.0)
    sigma = 60.0 * 1.3 / REF.H(0.3).value
    assert np.std(out[:, 2] - 250.0) == pytest.approx(sigma, rel=0.01)
    assert np.array_equal(out[:, :2], pos[:, :2])
    edge = apply_box_redshift_scatter(np.zeros((1000, 3)), 0, 300.0, 0.3, COSMO, rng, 500.0)
    assert edge.min() >= 0 and edge.max() < 500.0
    assert np.array_equal(apply_box_redshift_scatter(pos, 0, 0.0, 0.3, COSMO, rng, 500.0), pos)


def test_bad_axis_and_sigma_are_input_errors():
    box = one_galaxy_box([1.0, 2.0, 3.0], [0.0, 0.0, 0.0])
    with pytest.raises(InputError, match="axis"):
        apply_box_rsd(box, 3, COSMO)
    with pytest.raises(InputError, match="sigma_v"):
        apply_box_redshift_scatter(box.position, 0, -5.0, 0.5, COSMO,
                                   np.random.default_rng(0), 500.0)


def test_per_galaxy_draws_follow_the_box_galaxies_identities():
    """A box without identities draws from the named stream in its own order; a box whose
    galaxies carry identities gives a galaxy the same draw in every box that holds it (the
    HOD derivatives' ± boxes), and the draws stay standard: a KS test of the normals against
    N(0, 1) and of the uniforms against U(0, 1)."""
    from scipy import stats

    from conecheck.box.effects import galaxy_normals, galaxy_uniforms
    from conecheck.streams import seeded_rng

    n = 50_000
    rng = np.random.default_rng(2)
    plain = GalaxyBox(rng.uniform(0, 500.0, (n, 3)), np.zeros((n, 3)), 500.0, 0.3)
    assert np.array_equal(galaxy_uniforms(plain, 7, "box-dilution", "s"),
                          seeded_rng(7, "box-dilution", "s").random(n))
    assert np.array_equal(galaxy_normals(plain, 7, "box-scatter"),
                          seeded_rng(7, "box-scatter").standard_normal(n))
    keyed = GalaxyBox(plain.position, plain.velocity, 500.0, 0.3,
                      draw_key=rng.permutation(10 * n)[:n].astype(np.uint64))
    part = keyed.subset(rng.random(n) < 0.3)
    for draw in (galaxy_uniforms, galaxy_normals):
        whole = draw(keyed, 7, "x")
        mine = dict(zip(keyed.draw_key.tolist(), whole.tolist(), strict=True))
        assert np.array_equal(draw(part, 7, "x"), [mine[k] for k in part.draw_key.tolist()])
    assert stats.kstest(galaxy_uniforms(keyed, 7, "x"), "uniform").pvalue > 1e-4
    assert stats.kstest(galaxy_normals(keyed, 7, "x"), "norm").pvalue > 1e-4
    scattered = apply_box_redshift_scatter(keyed.position, 2, 100.0, 0.3, COSMO,
                                           galaxy_normals(keyed, 7, "x"), 500.0)
    assert np.array_equal(scattered[:, :2], keyed.position[:, :2])
