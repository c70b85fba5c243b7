"""Physical fluxes: apparent magnitudes from the true distance and Doppler shift, and the
absolute magnitudes an analyst infers from measured redshifts (conecheck.cone.photometry)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from astropy.cosmology import FlatLambdaCDM
from cone_helpers import COSMO, poisson_box, survey

from conecheck.catalog import GalaxyBox
from conecheck.cone import (
    RedshiftErrorSettings,
    SurveyShell,
    apparent_magnitude,
    build_cone,
    inferred_abs_mag,
    observed_frame_magnitude,
)
from conecheck.cone.build import cone_rngs
from conecheck.cone.corrections import ZFLAG_NEAREST_REDSHIFT
from conecheck.cone.settings import FibreSettings
from conecheck.cosmology import C_KMS

REF = FlatLambdaCDM(H0=100.0, Om0=COSMO.omega_m, Tcmb0=0.0)
LN10 = math.log(10.0)


def test_at_rest_the_physical_flux_is_the_observed_frame_formula():
    # No peculiar velocity: z_true = z_cos and the two formulas must agree bit for bit,
    # also with a K polynomial and an evolution term.
    z = np.linspace(0.005, 0.3, 500)
    mags = np.linspace(-23.0, -17.0, 500)
    for shell in (None, SurveyShell(kcorrection=(0.02, 1.1, -0.5), evolution_q=1.6,
                                    evolution_z_ref=0.1)):
        np.testing.assert_array_equal(apparent_magnitude(mags, z, z, COSMO, shell),
                                      observed_frame_magnitude(mags, z, COSMO, shell))
    # and the distance modulus is astropy's (reference library), with H0 = 100 for Mpc/h
    np.testing.assert_allclose(observed_frame_magnitude(0.0, z, COSMO), REF.distmod(z).value,
                               atol=1e-6)


def test_moving_source_luminosity_distance_is_davis_et_al():
    # Davis et al. (2011, ApJ 741, 67, eq. 15): D_L = D_L(z_cos) (1 + z_pec)^2.
    z_cos, v = 0.03, 600.0
    z_pec = v / C_KMS
    z_true = (1 + z_cos) * (1 + z_pec) - 1
    m = float(apparent_magnitude(-20.0, z_cos, z_true, COSMO))
    d_l = REF.luminosity_distance(z_cos).value * (1 + z_pec) ** 2
    assert abs(m - (-20.0 + 5 * np.log10(d_l) + 25)) < 1e-6


def test_inferred_magnitude_scatter_matches_first_order_expansion():
    r"""rms of M_inferred − M at fixed z_cos against (5/ln 10) σ_v / (c z).

    Derivation (first order in v/c): 1 + z_obs = (1 + z)(1 + v/c), so δz = (1 + z) v/c.
    M_inferred − M = DM(z) + 10 log10(1 + v/c) − DM(z_obs), with DM = 5 log10 D_L + 25 and
    D_L = (1 + z) χ(z):  d ln D_L / dz = 1/(1 + z) + c / (H(z) χ(z)).  Hence

        M_inferred − M = (5/ln 10)(v/c) [2 − 1 − (1 + z) c / (H χ)]
                       = −(5/ln 10)(v/c) [(1 + z) c / (H χ) − 1],

    and since c / (H χ) → 1/z at low z, rms = (5/ln 10) σ_v / (c z) (1 + O(z)).

    Tolerances: the rms of N Gaussian deviates has relative error 1/√(2N) (0.5 % for
    N = 20000; 4σ = 2 %); the neglected second order is (σ_v/(c z))² ≈ 0.3 % here. Against
    the exact first-order coefficient the margin is 2 % + 0.5 %; against the leading term
    (5/ln 10) σ_v/(c z) the O(z) remainder (≈ z (1 + q0)/2 − z ≈ −z/2... a few per cent
    at z = 0.02–0.04) is added to the margin as 2 z.
    """
    rng = np.random.default_rng(3)
    sigma_v, n = 300.0, 20000
    for z in (0.02, 0.04):
        v = rng.normal(0.0, sigma_v, n)
        z_true = (1 + z) * (1 + v / C_KMS) - 1
        m = apparent_magnitude(np.full(n, -20.0), np.full(n, z), z_true, COSMO)
        d_m = inferred_abs_mag(m, z_true, COSMO) + 20.0   # no measurement error
        rms = float(np.sqrt(np.mean(d_m**2)))
        chi = float(COSMO.comoving_distance(z))
        hub = float(COSMO.hubble(z))
        exact = 5 / LN10 * sigma_v / C_KMS * ((1 + z) * C_KMS / (hub * chi) - 1)
        leading = 5 / LN10 * sigma_v / (C_KMS * z)
        assert abs(rms / exact - 1) < 0.025, (z, rms, exact)
        assert abs(rms / leading - 1) < 0.025 + 2 * z, (z, rms, leading)
        # the sign: a galaxy receding faster than the Hubble flow looks brighter
        assert np.corrcoef(v, d_m)[0, 1] < -0.99


def _targets(box, sv):
    _, info = build_cone(box, sv, [100, 100, 100], None, cone_rngs(7, 0), keep_targets=True)
    t = info["targets"]
    return set(zip(np.asarray(t["box_index"]).tolist(), np.asarray(t["replica"]).tolist(),
                   strict=True))


def test_redshift_errors_change_no_target():
    # The flux limit acts on m, which does not depend on how well z is measured.
    box = poisson_box(30000, 200.0, seed=2, sigma_v=250.0, mags=(-22.0, -18.0))
    # one padded shell for both (the automatic margin grows with the redshift errors)
    shell = SurveyShell(z_min=0.02, z_max=0.06, m_lim=16.5, margin_mpch=30.0)
    big = RedshiftErrorSettings(sigma_v_kms=400.0)
    kw = dict(fibres=False, use_footprint=False, shell=shell)
    with_err = _targets(box, survey(errors=True, redshift_errors=big, **kw))
    without = _targets(box, survey(errors=False, **kw))
    assert with_err == without and len(without) > 1000
    # the observed-frame model lets measurement errors decide who is a target (the
    # unphysical behaviour this replaces), so the comparison can fail
    old_err = _targets(box, survey(errors=True, redshift_errors=big, physical_fluxes=False,
                                   **kw))
    old = _targets(box, survey(errors=False, physical_fluxes=False, **kw))
    assert old_err != old


def test_cone_magnitudes_at_rest_equal_the_box_and_scatter_with_velocities():
    shell = SurveyShell(z_min=0.01, z_max=0.06, m_lim=17.5)
    kw = dict(fibres=False, use_footprint=False, errors=False, shell=shell)
    rest = poisson_box(30000, 200.0, seed=4, sigma_v=0.0, mags=(-22.0, -18.0))
    phys, _ = build_cone(rest, survey(**kw), [100, 100, 100], None, cone_rngs(1, 0))
    old, _ = build_cone(rest, survey(physical_fluxes=False, **kw), [100, 100, 100], None,
                        cone_rngs(1, 0))
    # equal to rounding: the RSD step computes (1 + z)(1 + 0) − 1 for the observed redshift
    np.testing.assert_allclose(phys["app_mag"], old["app_mag"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(phys["abs_mag"], phys["abs_mag_true"], rtol=0, atol=1e-12)
    # with velocities: per redshift bin, the rms of M_inferred − M follows the first-order
    # prediction averaged over the bin's galaxies, sqrt(<((5/ln 10) σ_v/(c z))²>), within
    # 4/√(2N) plus 2 z_max for the O(z) remainder (test above)
    sigma_v = 300.0
    moving = poisson_box(60000, 200.0, seed=4, sigma_v=sigma_v, mags=(-22.0, -18.0))
    cone, _ = build_cone(moving, survey(**kw), [100, 100, 100], None, cone_rngs(1, 0))
    z = np.asarray(cone["z_obs"])
    d_m = np.asarray(cone["abs_mag"] - cone["abs_mag_true"])
    for lo, hi in ((0.015, 0.025), (0.025, 0.04)):
        sel = (z >= lo) & (z < hi)
        n = int(sel.sum())
        assert n > 2000
        predicted = 5 / LN10 * sigma_v / C_KMS * np.sqrt(np.mean(1 / z[sel] ** 2))
        rms = float(np.sqrt(np.mean(d_m[sel] ** 2)))
        assert abs(rms / predicted - 1) < 4 / np.sqrt(2 * n) + 2 * hi, (lo, rms, predicted)


def test_nearest_redshift_correction_recomputes_the_inferred_magnitude():
    # An analyst who gives a collided galaxy its neighbour's redshift infers M from it.
    rng = np.random.default_rng(11)
    n = 3000
    centre = rng.uniform(0, 200.0, 3)
    pos = np.mod(centre + rng.normal(0.0, 4.0, (n, 3)), 200.0)   # dense: many collisions
    box = GalaxyBox(pos, rng.normal(0, 300.0, (n, 3)), 200.0, 0.05,
                    abs_mag=rng.uniform(-22.0, -19.0, n))
    shell = SurveyShell(z_min=0.005, z_max=0.08)
    observer = np.mod(centre - np.array([0.0, 0.0, 60.0]), 200.0)
    sv = survey(use_footprint=False, flux=False, shell=shell, correction="nearest_redshift",
                fibre_settings=FibreSettings(angle_arcsec=200.0, overlap_fraction=0.0))
    cone, _ = build_cone(box, sv, observer, None, cone_rngs(5, 0))
    lost = np.asarray(cone["zflag"]) == ZFLAG_NEAREST_REDSHIFT
    assert lost.sum() > 50
    want = inferred_abs_mag(cone["app_mag"], cone["z_obs"], COSMO)
    np.testing.assert_allclose(cone["abs_mag"], want, rtol=0, atol=1e-12)
    # the borrowed redshift moves M by far more than the velocity scatter of own redshifts
    own = inferred_abs_mag(cone["app_mag"], cone["z_obs_true"], COSMO)
    assert np.median(np.abs(np.asarray(cone["abs_mag"] - own)[lost])) > 0.05


def test_non_monotonic_kcorrection_is_refused_with_its_key():
    shell = SurveyShell(z_min=0.02, z_max=0.1, m_lim=17.0, kcorrection=(0.0, -60.0))
    problem = shell.flux_monotonic_problem(COSMO)
    assert problem is not None and "shell.kcorrection" in problem
    assert SurveyShell(kcorrection=(0.0, 2.0)).flux_monotonic_problem(COSMO) is None


@pytest.mark.parametrize("bad", [("x",), (float("nan"),), tuple(range(9))])
def test_bad_kcorrection_values_name_the_key(bad):
    from conecheck.errors import InputError
    with pytest.raises(InputError, match="kcorrection"):
        SurveyShell(kcorrection=bad)


def test_luminosity_scatter_counts_and_sums_add_up():
    from astropy.table import Table

    from conecheck.cone.photometry import luminosity_scatter
    from conecheck.run.validate import luminosity_record
    t = Table({"z_obs": [0.02, 0.03, 0.04, 0.05, 0.2],
               "abs_mag": [-20.1, -19.9, -20.5, -19.0, -22.0],
               "abs_mag_true": [-19.9, -20.1, -20.4, -19.1, -22.0]})
    rec = luminosity_scatter(t, -20.0, 0.01, 0.06, n_z=1)
    # true members: rows 1, 2; inferred members: rows 0, 2; changed: rows 0, 1
    assert (rec["n_true"], rec["n_inferred"], rec["n_changed"]) == (2, 2, 2)
    assert rec["count"] == [3] and abs(rec["sum_sq"][0] - (0.04 + 0.04 + 0.01)) < 1e-12
    out = luminosity_record([rec, rec])
    assert out["membership_changed_fraction"] == [1.0, 1.0]
    assert abs(out["rms_mag"][0] - np.sqrt(0.09 / 3)) < 1e-12
    assert luminosity_scatter(t, None, 0.01, 0.06) is None


def test_preflight_warns_when_the_box_has_no_galaxies_below_a_threshold():
    from run_helpers import tiny_dict

    from conecheck.config import config_from_dict
    from conecheck.run.preflight import faint_end_cautions
    cfg = config_from_dict(tiny_dict())
    thr = cfg.samples[0].mag_max
    rng = np.random.default_rng(0)
    n = 2000
    pos, vel = rng.uniform(0, 100, (n, 3)), rng.normal(0, 300, (n, 3))
    cut_box = GalaxyBox(pos, vel, 100.0, 0.05, abs_mag=rng.uniform(-23, thr, n))
    deep_box = GalaxyBox(pos, vel, 100.0, 0.05, abs_mag=rng.uniform(-23, thr + 1.0, n))
    (caution,) = faint_end_cautions(cfg, cut_box)
    assert cfg.samples[0].name in caution and "physical_fluxes" in caution
    assert faint_end_cautions(cfg, deep_box) == []
    off = config_from_dict(tiny_dict(**{"survey.effects.physical_fluxes": False}))
    assert faint_end_cautions(off, cut_box) == []


def test_schechter_density_matches_the_incomplete_gamma_function():
    # ∫_{-∞}^{M} Φ dM = φ* Γ(α + 1, x) with x = 10^(−0.4 (M − M*)) (Schechter 1976, ApJ 203,
    # 297); scipy's regularised gammaincc needs α + 1 > 0, so the check uses α = −0.5
    # (the 60 L* upper cut of the quadrature leaves e^-60 out).
    from scipy.special import gamma, gammaincc

    from conecheck.cone.settings import LuminosityFunction
    lf = LuminosityFunction(phi_star=0.01, m_star=-20.5, alpha=-0.5)
    for m in (-22.0, -20.5, -19.0, -17.0):
        x = 10 ** (-0.4 * (m - lf.m_star))
        want = lf.phi_star * gammaincc(0.5, x) * gamma(0.5)
        assert lf.density_brighter(m) == pytest.approx(want, rel=1e-6)


def test_target_density_and_the_collision_scaling():
    from conecheck.cone.photometry import expected_targets_per_sr, full_list_collided_fraction
    from conecheck.cone.settings import LuminosityFunction
    lf = LuminosityFunction()
    shell = SurveyShell(z_min=0.02, z_max=0.06, m_lim=17.0)
    # a thin slice: the count is the slice volume times the density above M_lim(z)
    thin = SurveyShell(z_min=0.04, z_max=0.0401, m_lim=17.0)
    v = float(COSMO.shell_volume_per_sr(0.04, 0.0401))
    m_abs = 17.0 - float(REF.distmod(0.04005).value)
    assert expected_targets_per_sr(lf, thin, COSMO) == pytest.approx(
        v * lf.density_brighter(m_abs), rel=1e-3)
    # deeper flux limits hold more targets
    deeper = SurveyShell(z_min=0.02, z_max=0.06, m_lim=17.5)
    assert expected_targets_per_sr(lf, deeper, COSMO) > expected_targets_per_sr(lf, shell, COSMO)
    # random sky: the free fraction exp(−Σπθ²) → doubling Σ squares it
    f = 1 - np.exp(-0.05)
    assert full_list_collided_fraction(f, 2.0) == pytest.approx(1 - np.exp(-0.1))
