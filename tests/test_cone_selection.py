"""Redshift space, footprint sampling, flux limits, volume limits and sample cuts."""

from __future__ import annotations

import healpy as hp
import numpy as np
import pytest
from astropy.cosmology import FlatLambdaCDM
from cone_helpers import COSMO, cap_footprint, poisson_box, survey
from scipy import stats

from conecheck.catalog import GalaxyBox
from conecheck.cone import (
    RedshiftErrorSettings,
    SampleCut,
    SurveyShell,
    build_cone,
    select_cut,
    select_sample,
    volume_limit_zmax,
)
from conecheck.cone.build import cone_rngs
from conecheck.cosmology import C_KMS
from conecheck.errors import InputError
from conecheck.footprint.maps import Footprint

REF = FlatLambdaCDM(H0=100.0, Om0=COSMO.omega_m, Tcmb0=0.0)


def test_radial_velocity_gives_doppler_composition():
    # Relativistic-composition form z_obs = (1 + z)(1 + v/c) - 1 for a radial velocity
    # (first-order Doppler factor; common practice in mock catalogues).
    rng = np.random.default_rng(1)
    L, o = 200.0, np.array([100.0, 100.0, 100.0])
    pos = rng.uniform(0, L, (3000, 3))
    v = rng.uniform(-800, 800, 3000)
    d = pos - o
    vel = v[:, None] * d / np.linalg.norm(d, axis=1)[:, None]
    box = GalaxyBox(pos, vel, L, 0.1)
    sv = survey(errors=False, fibres=False, use_footprint=False,
                shell=SurveyShell(z_min=0.005, z_max=0.03))
    cone, _ = build_cone(box, sv, o, None, np.random.default_rng(0))
    vv = v[cone["box_index"]]
    np.testing.assert_allclose(cone["v_los"], vv, atol=1e-9)
    np.testing.assert_allclose(cone["z_obs"], (1 + cone["z_cos"]) * (1 + vv / C_KMS) - 1,
                               rtol=0, atol=1e-14)
    # the analyst's distance: astropy comoving distance at z_obs (reference library)
    np.testing.assert_allclose(cone["chi_obs"], REF.comoving_distance(cone["z_obs"]).value,
                               rtol=1e-6)


def test_redshift_errors_are_gaussian_and_streams_independent():
    box = poisson_box(20000, 200.0, seed=2, sigma_v=300.0)
    shell = SurveyShell(z_min=0.01, z_max=0.05, margin_mpch=30.0)
    errs = RedshiftErrorSettings(sigma_v_kms=60.0)
    base = survey(errors=False, fibres=False, use_footprint=False, shell=shell,
                  redshift_errors=errs)
    noisy = survey(errors=True, fibres=False, use_footprint=False, shell=shell,
                   redshift_errors=errs)
    # per-stage streams: switching errors on changes nothing but z_obs
    _, i0 = build_cone(box, base, [50, 60, 70], None, cone_rngs(7, 0), keep_targets=True)
    _, i1 = build_cone(box, noisy, [50, 60, 70], None, cone_rngs(7, 0), keep_targets=True)
    t0, t1 = i0["targets"], i1["targets"]
    key0 = np.asarray(t0["box_index"]) * 100 + t0["replica"]
    key1 = np.asarray(t1["box_index"]) * 100 + t1["replica"]
    common, a, b = np.intersect1d(key0, key1, return_indices=True)
    assert len(common) > 0.99 * max(len(key0), len(key1))
    pull = (t1["z_obs"][b] - t0["z_obs"][a]) / ((1 + t0["z_cos"][a]) * 60.0 / C_KMS)
    # Normal pulls: KS test against N(0, 1) (scipy.stats)
    assert stats.kstest(pull, "norm").pvalue > 1e-3


def test_sigma_z_model():
    s = RedshiftErrorSettings(model="sigma_z", sigma_z0=0.001)
    np.testing.assert_allclose(s.sigma_z(np.array([0.0, 1.0])), [0.001, 0.002])


@pytest.mark.parametrize("z_cut", [(0.02, 0.04), (0.03, 0.06), (0.02, 0.06)])
def test_poisson_counts_match_density_times_effective_volume(z_cut):
    # Homogeneous check: E[N] = n V_eff, V_eff = (Omega_eff / 3)(chi_max^3 - chi_min^3)
    # (design.md section 6; Hogg 1999 astro-ph/9905116 for the flat volume element);
    # Poisson error sqrt(E[N]).
    L, n_gal = 150.0, 60000
    box = poisson_box(n_gal, L, seed=3)
    nside = 32
    vals = np.zeros(hp.nside2npix(nside))
    ra, dec = hp.pix2ang(nside, np.arange(vals.size), lonlat=True)
    vals[(dec > -10) & (dec < 50) & (ra < 120)] = 1.0
    vals[(dec > -10) & (dec < 50) & (ra >= 120) & (ra < 200)] = 0.5  # partial completeness
    fp = Footprint.from_map(vals)
    sv = survey(fp, rsd=False, errors=False, fibres=False,
                shell=SurveyShell(z_min=0.02, z_max=0.06))
    cone, _ = build_cone(box, sv, [75, 75, 75], None, np.random.default_rng(4))
    cut = select_sample(cone, None, *z_cut)
    chi = COSMO.comoving_distance(np.array(z_cut))
    expected = n_gal / L**3 * fp.area_sr / 3.0 * (chi[1] ** 3 - chi[0] ** 3)
    assert abs(len(cut) - expected) < 4.0 * np.sqrt(expected)
    assert expected > 2000


def test_flux_limit_matches_astropy_distance_modulus():
    # Reference: astropy distmod with H0 = 100 gives 5 log10(D_L/(Mpc/h)) + 25.
    box = poisson_box(30000, 200.0, seed=5, sigma_v=200.0, mags=(-23.0, -17.0))
    shell = SurveyShell(z_min=0.01, z_max=0.06, m_lim=17.0)
    sv = survey(fibres=False, use_footprint=False, shell=shell)
    cone, info = build_cone(box, sv, [100, 100, 100], None, cone_rngs(1, 0),
                            keep_targets=True)
    m = cone["abs_mag"] + REF.distmod(cone["z_obs"]).value
    np.testing.assert_allclose(cone["app_mag"], m, atol=1e-5)
    assert np.all(cone["app_mag"] < 17.0)
    # volume limit: every galaxy brighter than M_thr below z_max(M_thr) survives the limit
    mthr = -19.0
    zlim = volume_limit_zmax(17.0, mthr, COSMO)
    assert 0.02 < zlim < 0.055
    no_flux = survey(fibres=False, use_footprint=False, flux=False, shell=shell)
    full, _ = build_cone(box, no_flux, [100, 100, 100], None, cone_rngs(1, 0))
    want = select_sample(full, mthr, 0.01, zlim)
    got = select_sample(cone, mthr, 0.01, zlim)
    assert len(got) == len(want) > 100
    # ... and the limit is sharp: beyond it some are lost
    assert len(select_sample(cone, mthr, zlim, 0.06)) < len(select_sample(full, mthr, zlim,
                                                                        0.06))


def test_volume_limit_round_trip():
    # Round trip through Cosmology.distance_modulus, and astropy distmod (reference library).
    for m_lim, mthr in [(17.77, -20.0), (19.5, -21.5), (16.0, -18.0)]:
        z = volume_limit_zmax(m_lim, mthr, COSMO)
        assert abs(mthr + float(COSMO.distance_modulus(z)) - m_lim) < 1e-6
        assert abs(mthr + REF.distmod(z).value - m_lim) < 1e-5
    shell = SurveyShell(kcorrection=(0.1, 1.5))
    z = volume_limit_zmax(17.77, -20.0, COSMO, shell)
    assert abs(-20.0 + float(COSMO.distance_modulus(z)) + 0.1 + 1.5 * z - 17.77) < 1e-8
    assert z < volume_limit_zmax(17.77, -20.0, COSMO)
    # evolution E(z) = -Q (z - z_ref) (Blanton et al. 2003 form) enters the same equation
    shell = SurveyShell(kcorrection=(0.0, 1.0, 2.0), evolution_q=1.6, evolution_z_ref=0.1)
    z = volume_limit_zmax(17.77, -20.0, COSMO, shell)
    assert abs(-20.0 + REF.distmod(z).value + z + 2 * z**2 - 1.6 * (z - 0.1) - 17.77) < 1e-5


def test_footprint_completeness_thins_galaxies():
    box = poisson_box(40000, 150.0, seed=6)
    fp = cap_footprint(32, 180.0, 30.0, 25.0, value=0.4)
    sv = survey(fp, rsd=False, errors=False, fibres=False,
                shell=SurveyShell(z_min=0.01, z_max=0.05))
    full = survey(fp, rsd=False, errors=False, fibres=False, use_footprint=False,
                  shell=SurveyShell(z_min=0.01, z_max=0.05))
    cone, _ = build_cone(box, sv, [75, 75, 75], None, np.random.default_rng(0))
    sky, _ = build_cone(box, full, [75, 75, 75], None, np.random.default_rng(0))
    assert np.all(fp.contains(cone["ra"], cone["dec"]))
    n_in = int(fp.contains(sky["ra"], sky["dec"]).sum())
    # Binomial thinning at p = 0.4
    assert abs(len(cone) - 0.4 * n_in) < 4 * np.sqrt(n_in * 0.4 * 0.6)
    np.testing.assert_allclose(cone["completeness"], 0.4)


def test_bad_inputs_name_the_setting():
    box = poisson_box(2000, 100.0, seed=7)  # no magnitudes
    with pytest.raises(InputError, match="m_lim"):
        build_cone(box, survey(use_footprint=False, shell=SurveyShell(m_lim=17.0)),
                   [50, 50, 50], None, np.random.default_rng(0))
    # flux limit switched off: fine without magnitudes
    build_cone(box, survey(use_footprint=False, flux=False, shell=SurveyShell(m_lim=17.0)),
               [50, 50, 50], None, np.random.default_rng(0))
    # a footprint the shell's galaxies never reach (tiny cap, thin shell, sparse box)
    tiny = cap_footprint(256, 10.0, 10.0, 0.3)
    with pytest.raises(InputError, match="footprint"):
        build_cone(box, survey(tiny, shell=SurveyShell(z_min=0.02, z_max=0.021)),
                   [50, 50, 50], None, np.random.default_rng(0))

    class Empty:
        nside, area_deg2 = 8, 0.0

        def completeness(self, ra, dec):
            return np.zeros(np.shape(ra))

    with pytest.raises(InputError, match="footprint"):
        build_cone(box, survey(Empty()), [50, 50, 50], None, np.random.default_rng(0))
    cone, _ = build_cone(box, survey(use_footprint=False, fibres=False, flux=False),
                         [50, 50, 50], None, np.random.default_rng(0))
    with pytest.raises(InputError, match="sample cut 'thin'"):
        select_cut(cone, SampleCut("thin", z_min=0.09, z_max=0.095))
    with pytest.raises(InputError, match="abs_mag"):
        select_sample(cone, -20.0, 0.02, 0.05)


def test_cone_carries_the_box_galaxies_halo_columns():
    # Cone rows keep the central flag, halo id and halo mass of their box galaxy.
    rng = np.random.default_rng(8)
    n = 20000
    box = GalaxyBox(rng.uniform(0, 150.0, (n, 3)), np.zeros((n, 3)), 150.0, 0.05,
                    abs_mag=rng.uniform(-22, -19, n), is_central=rng.random(n) < 0.7,
                    halo_id=np.arange(n, dtype=np.int64),
                    halo_mass=10 ** rng.uniform(11, 14, n))
    sv = survey(fibres=False, use_footprint=False, flux=False,
                shell=SurveyShell(z_min=0.01, z_max=0.04))
    cone, _ = build_cone(box, sv, [75, 75, 75], None, cone_rngs(2, 0))
    idx = np.asarray(cone["box_index"])
    for name in ("is_central", "halo_id", "halo_mass"):
        np.testing.assert_array_equal(cone[name], getattr(box, name)[idx])
