"""HOD occupations, assembly-bias decoration, magnitudes and parameter loading."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.special import erf

from conecheck.box import (
    AssemblyBias,
    HaloCatalog,
    HODModel,
    default_hod_model,
    default_hod_path,
    density_brighter_than,
    halo_threshold_densities,
    load_hod,
    populate,
)
from conecheck.box.hod import DEFAULT_HOD, split_by_secondary
from conecheck.box.populate import KeyedDraws, galaxy_ids, poisson_quantile, populate_models
from conecheck.box.sensitivity import DEFAULT_STEPS, step_values, varied_model
from conecheck.errors import InputError
from conecheck.streams import keyed_uniforms, stream_key

BOX = 1000.0


def make_halos(mass, rng, secondary=None, **kw):
    n = len(mass)
    props = {} if secondary is None else {"secondary": secondary}
    return HaloCatalog(rng.uniform(0, BOX, (n, 3)), rng.normal(0, 300, (n, 3)),
                       np.asarray(mass, float), BOX, 0.2, properties=props, **kw)


def threshold_occupation(mass, p):
    """Zheng et al. 2007 (ApJ 667, 760) eqs. 2-3, written out independently of the package."""
    logm = np.log10(mass)
    cen = 0.5 * (1 + erf((logm - p["log_mmin"]) / p["sigma_logm"]))
    m0, m1 = 10 ** p["log_m0"], 10 ** p["log_m1"]
    sat = np.where(mass > m0, (np.clip(mass - m0, 0, None) / m1) ** p["alpha"], 0.0)
    return cen, sat


def counts_per_halo(box, n_halo, mag, central):
    sel = (box.abs_mag < mag) & (box.is_central == central)
    return np.bincount(box.halo_id[sel], minlength=n_halo)


def binned_chi2(mass, observed, expected, variance, edges):
    which = np.digitize(np.log10(mass), edges) - 1
    chi2, dof = 0.0, 0
    for b in range(len(edges) - 1):
        s = which == b
        if s.sum() < 50 or variance[s].sum() == 0:
            continue
        diff = observed[s].sum() - expected[s].sum()
        chi2 += diff**2 / variance[s].sum()
        dof += 1
    return chi2, dof


@pytest.fixture(scope="module", params=["stream", "keyed"])
def populated(request):
    """Each occupation test runs on a box drawn from one generator and on one drawn per
    galaxy (the HOD derivatives' draws): both must follow the same HOD."""
    rng = np.random.default_rng(11)
    mass = 10 ** rng.uniform(11.3, 14.8, 150_000)
    halos = make_halos(mass, rng)
    draws = rng if request.param == "stream" else KeyedDraws(stream_key(11, "test-populate"))
    return halos, populate(halos, default_hod_model(), draws)


def test_mean_occupations_match_the_threshold_formulae(populated):
    # Source: Zheng et al. 2007, ApJ 667, 760, eqs. 2-3 (centrals Bernoulli, satellites Poisson)
    halos, box = populated
    edges = np.arange(11.3, 14.81, 0.25)
    p = DEFAULT_HOD["threshold"][0]
    cen_exp, sat_exp = threshold_occupation(halos.mass, p)
    n_cen = counts_per_halo(box, len(halos), p["mag_max"], True)
    n_sat = counts_per_halo(box, len(halos), p["mag_max"], False)
    for obs, exp, var in ((n_cen, cen_exp, cen_exp * (1 - cen_exp)), (n_sat, sat_exp, sat_exp)):
        chi2, dof = binned_chi2(halos.mass, obs, exp, var, edges)
        assert dof >= 8
        assert stats.chi2.sf(chi2, dof) > 1e-3, (chi2, dof)


def test_magnitude_thresholds_reproduce_each_hod(populated):
    # Each threshold sample abs_mag < mag_max must follow its own Zheng et al. 2007 HOD.
    halos, box = populated
    edges = np.arange(11.3, 14.81, 0.25)
    assert np.all(box.abs_mag < DEFAULT_HOD["threshold"][0]["mag_max"])
    for p in DEFAULT_HOD["threshold"]:
        cen_exp, sat_exp = threshold_occupation(halos.mass, p)
        n_cen = counts_per_halo(box, len(halos), p["mag_max"], True)
        n_sat = counts_per_halo(box, len(halos), p["mag_max"], False)
        assert n_cen.max() <= 1
        for obs, exp, var in ((n_cen, cen_exp, cen_exp * (1 - cen_exp)),
                              (n_sat, sat_exp, sat_exp)):
            chi2, dof = binned_chi2(halos.mass, obs, exp, var, edges)
            assert stats.chi2.sf(chi2, dof) > 1e-3, (p["mag_max"], chi2, dof)
        # the totals too, with their Poisson/binomial errors
        total = n_cen.sum() + n_sat.sum()
        expect = cen_exp.sum() + sat_exp.sum()
        assert abs(total - expect) < 4 * np.sqrt(expect)


@pytest.mark.parametrize("mag", [None, -19.0, -20.0, -20.2, -20.75, -21.0, -21.4])
def test_expected_sample_density_matches_the_populated_box(populated, mag):
    """The expected density of abs_mag < mag equals the populated box's count.

    Given the halos, the count is a sum of independent Bernoulli (centrals) and Poisson
    (satellites) draws, so its variance is at most its mean: a 5σ margin (two-sided
    Gaussian tail 6·10⁻⁷) on this fixed seed.  Source of the occupations: Zheng et al. 2007
    (ApJ 667, 760); the in-bin magnitudes are uniform and the bright tail exponential.
    """
    halos, box = populated
    model = default_hod_model()
    per_threshold = halo_threshold_densities(halos, model)
    expect = density_brighter_than(model, per_threshold, mag) * BOX**3
    count = len(box) if mag is None else int(np.count_nonzero(box.abs_mag < mag))
    assert abs(count - expect) < 5 * np.sqrt(expect) + 1, (mag, count, expect)


def test_centrals_at_halo_centre_and_positions_wrapped(populated):
    halos, box = populated
    cen = box.is_central
    assert np.allclose(box.position[cen], halos.position[box.halo_id[cen]])
    assert np.allclose(box.velocity[cen], halos.velocity[box.halo_id[cen]])
    assert box.position.min() >= 0 and box.position.max() < BOX
    assert np.array_equal(box.halo_mass, halos.mass[box.halo_id])


def test_populate_is_reproducible():
    rng = np.random.default_rng(5)
    halos = make_halos(10 ** rng.uniform(12, 14, 2000), rng)
    a = populate(halos, default_hod_model(), np.random.default_rng(9))
    b = populate(halos, default_hod_model(), np.random.default_rng(9))
    assert np.array_equal(a.position, b.position) and np.array_equal(a.abs_mag, b.abs_mag)


def test_populate_with_one_generator_keeps_its_draw_order():
    """The main box draws from one generator in a fixed order: the halos' central uniforms,
    then their satellite counts (Poisson), then the satellites' draws. Replaying the first
    two from a generator of the same seed gives the box's occupation exactly (same numpy on
    both sides, so this holds for any numpy version's streams)."""
    rng = np.random.default_rng(5)
    halos = make_halos(10 ** rng.uniform(11.5, 14.5, 3000), rng)
    model = default_hod_model()
    box = populate(halos, model, np.random.default_rng(9))
    replay = np.random.default_rng(9)
    cen, sat = model.mean_occupations(halos.mass)
    has_central = replay.random(len(halos)) < cen[0]
    n_sat = replay.poisson(sat[0])
    assert box.draw_key is None
    assert np.array_equal(np.sort(box.halo_id[box.is_central]), np.flatnonzero(has_central))
    assert np.array_equal(np.bincount(box.halo_id[~box.is_central], minlength=len(halos)),
                          n_sat)


def test_keyed_uniforms_are_uniform_independent_and_per_identity():
    """Counter-based draws: a KS test against U(0, 1) and correlations between fields and
    neighbours within 5/√N (their standard error for independent uniforms), and each
    identity's number unchanged by which other identities are drawn with it."""
    ids = np.arange(200_000, dtype=np.uint64) * np.uint64(7) + np.uint64(3)
    key = stream_key(4, "test")
    u, v = keyed_uniforms(key, ids, 0), keyed_uniforms(key, ids, 1)
    assert u.min() >= 0.0 and u.max() < 1.0
    assert stats.kstest(u, "uniform").pvalue > 1e-4
    bound = 5.0 / np.sqrt(ids.size)
    assert abs(np.corrcoef(u, v)[0, 1]) < bound
    assert abs(np.corrcoef(u[:-1], u[1:])[0, 1]) < bound
    assert abs(np.corrcoef(u, keyed_uniforms(stream_key(5, "test"), ids, 0))[0, 1]) < bound
    pick = np.array([17, 5, 123_456])
    assert np.array_equal(keyed_uniforms(key, ids[pick], 0), u[pick])


def _derivative_setup(rng, n, name):
    """Halos with a secondary property, the default HOD with assembly bias, its faintest
    threshold and the ± values of parameter ``name`` (the HOD derivatives' set-up)."""
    halos = make_halos(10 ** rng.uniform(11.5, 14.8, n), rng, secondary=rng.random(n))
    model = default_hod_model()
    model = HODModel(model.thresholds, AssemblyBias(secondary="secondary"), model.concentration,
                     model.satellites_need_central, model.bright_tail_mag)
    thr = model.thresholds[0]
    return halos, model, thr, step_values(model, thr, name, DEFAULT_STEPS[name])


@pytest.mark.parametrize("name", ["log_mmin", "log_m1", "alpha", "a_sat"])
def test_keyed_draws_share_every_galaxy_both_models_occupy(name):
    """Common random numbers for the HOD derivatives: the ± boxes of a parameter hold the
    same galaxy (same identity) at the same place with the same velocity and magnitude
    wherever both models occupy it. A halo's satellites are its first ranks in both boxes,
    so the boxes share exactly min(n₋, n₊) satellites per halo and every central both
    place; and a parameter that lowers every satellite mean or none (log M₁; log M_min,
    through the central when satellites need one) lowers every halo's count or leaves it
    (the Poisson quantile of one uniform never rises as the mean falls)."""
    n = 40_000
    halos, model, thr, (lo, hi) = _derivative_setup(np.random.default_rng(3), n, name)
    draws = KeyedDraws(stream_key(8, "test-coupling"))
    a, b = (populate(halos, varied_model(model, thr, name, v), draws) for v in (lo, hi))
    common, ia, ib = np.intersect1d(a.draw_key, b.draw_key, return_indices=True)
    for col in ("position", "velocity", "abs_mag", "is_central", "halo_id"):
        assert np.array_equal(getattr(a, col)[ia], getattr(b, col)[ib]), col
    sat_a = np.bincount(a.halo_id[~a.is_central], minlength=n)
    sat_b = np.bincount(b.halo_id[~b.is_central], minlength=n)
    both_central = np.intersect1d(a.halo_id[a.is_central], b.halo_id[b.is_central]).size
    assert common.size == np.minimum(sat_a, sat_b).sum() + both_central
    assert common.size < max(len(a), len(b))          # the step changed some occupation
    if name in ("log_mmin", "log_m1"):
        assert np.all(sat_b <= sat_a)


@pytest.mark.parametrize("name", ["log_mmin", "alpha", "a_cen"])
def test_models_populated_together_equal_each_populated_alone(name):
    """The HOD derivatives' ± boxes populated in one call (shared halo draws and the
    union's satellites) are, field for field and bit for bit, the boxes of two separate
    calls; one generator cannot serve two models at once."""
    halos, model, thr, (lo, hi) = _derivative_setup(np.random.default_rng(4), 30_000, name)
    models = [varied_model(model, thr, name, v) for v in (lo, hi)]
    key = stream_key(6, "test-together")
    together = populate_models(halos, models, KeyedDraws(key))
    for m, box in zip(models, together, strict=True):
        alone = populate(halos, m, KeyedDraws(key))
        for col in ("position", "velocity", "abs_mag", "is_central", "halo_id", "halo_mass",
                    "draw_key"):
            assert np.array_equal(getattr(box, col), getattr(alone, col)), col
        assert box.meta == alone.meta
    assert len(together[0]) != len(together[1])
    with pytest.raises(ValueError, match="keyed draws"):
        populate_models(halos, models, np.random.default_rng(1))
    # without magnitudes (the derivatives' boxes, measured whole): every other column the
    # same, to the bit
    bare = populate_models(halos, models, KeyedDraws(key), magnitudes=False)
    for box, full in zip(bare, together, strict=True):
        assert box.abs_mag is None
        for col in ("position", "velocity", "is_central", "halo_id", "halo_mass", "draw_key"):
            assert np.array_equal(getattr(box, col), getattr(full, col)), col
    with pytest.raises(ValueError, match="keyed draws"):
        populate_models(halos, models[:1], np.random.default_rng(1), magnitudes=False)


def test_poisson_quantile_equals_scipy_and_never_falls_as_the_mean_rises():
    """Inverse-CDF Poisson counts against scipy.stats.poisson.ppf (reference library) over
    means from 0 to 400 (both the summed and the scipy branch), and monotone in the mean at
    fixed u (what couples the ± boxes' satellite counts)."""
    rng = np.random.default_rng(12)
    n = 300_000
    u = rng.random(n)
    mean = np.concatenate([np.zeros(1000), rng.exponential(1.0, n - 21_000),
                           rng.uniform(0.0, 30.0, 10_000), rng.uniform(30.0, 400.0, 10_000)])
    got = poisson_quantile(u, mean)
    np.testing.assert_array_equal(got, stats.poisson.ppf(u, mean).astype(np.int64))
    assert np.all(got[:1000] == 0)
    assert np.all(poisson_quantile(u, mean * 1.05) >= got)


def test_galaxy_ids_refuse_a_rank_they_cannot_hold():
    with pytest.raises(InputError, match="satellites"):
        galaxy_ids(np.array([0]), np.array([1 << 24]))


@pytest.mark.parametrize("a_cen,a_sat", [(0.6, -0.8), (-1.0, 1.0)])
def test_decorated_hod_conserves_mean_and_moves_split(a_cen, a_sat):
    # Hearin et al. 2016, MNRAS 460, 2552, eqs. for the decorated HOD: at fixed mass the mean
    # occupation is unchanged; halos above the median secondary property get
    # <N> + A dN_max, those below <N> - A dN_max (split fraction 1/2), with
    # dN_max = min(N, 1 - N) for centrals and N for satellites.
    rng = np.random.default_rng(21)
    mass = 10 ** rng.uniform(11.6, 14.5, 200_000)
    secondary = rng.random(mass.size)
    halos = make_halos(mass, rng, secondary)
    model = load_hod({**DEFAULT_HOD, "assembly_bias": {"a_cen": a_cen, "a_sat": a_sat}})
    box = populate(halos, model, rng)
    p = DEFAULT_HOD["threshold"][0]
    cen_exp, sat_exp = threshold_occupation(mass, p)
    n_cen = counts_per_halo(box, mass.size, p["mag_max"], True)
    n_sat = counts_per_halo(box, mass.size, p["mag_max"], False)
    edges = np.arange(11.6, 14.51, 0.25)
    # conservation: all halos together follow the undecorated HOD
    for obs, exp in ((n_cen, cen_exp), (n_sat, sat_exp)):
        var = exp * (1 + abs(max(a_cen, a_sat)))  # generous: decoration changes the variance
        chi2, dof = binned_chi2(mass, obs, exp, var, edges)
        assert stats.chi2.sf(chi2, dof) > 1e-3, (chi2, dof)
    # the split between the halves: the median of the secondary property in 0.1-dex mass bins
    bins = np.floor(np.log10(mass) / 0.1)
    upper = np.zeros(mass.size, bool)
    for b in np.unique(bins):
        s = bins == b
        upper[s] = secondary[s] >= np.median(secondary[s])
    dmax_c = np.minimum(cen_exp, 1 - cen_exp)
    for half, sign in ((upper, 1.0), (~upper, -1.0)):
        exp_c = cen_exp + sign * a_cen * dmax_c
        exp_s = sat_exp * (1 + sign * a_sat)
        for obs, exp, var in ((n_cen, exp_c, exp_c * (1 - exp_c) + 1e-12), (n_sat, exp_s, exp_s)):
            if exp[half].sum() == 0:    # |A| = 1 empties one half completely
                assert obs[half].sum() == 0
                continue
            chi2, dof = binned_chi2(mass[half], obs[half], exp[half], var[half], edges)
            assert stats.chi2.sf(chi2, dof) > 1e-4, (chi2, dof)
    # and the shift is really there: the upper half has more centrals when A_cen > 0
    frac_up = n_cen[upper].mean() / n_cen[~upper].mean()
    assert (frac_up > 1.05) if a_cen > 0 else (frac_up < 0.95)


def test_split_by_secondary_halves_each_mass_bin():
    rng = np.random.default_rng(2)
    mass = 10 ** rng.uniform(12, 13, 10_001)
    sec = rng.random(mass.size)
    upper, p = split_by_secondary(mass, sec, 0.1)
    bins = np.floor(np.log10(mass) / 0.1)
    for b in np.unique(bins):
        s = bins == b
        assert abs(upper[s].sum() - s.sum() / 2) <= 0.5
        assert sec[s & upper].min() >= sec[s & ~upper].max()
        assert np.allclose(p[s], upper[s].mean())


def test_assembly_bias_without_secondary_column_is_input_error():
    rng = np.random.default_rng(1)
    halos = make_halos(10 ** rng.uniform(12, 14, 100), rng)
    model = load_hod({**DEFAULT_HOD, "assembly_bias": {"a_cen": 0.5, "secondary": "age"}})
    with pytest.raises(InputError, match="age"):
        populate(halos, model, rng)


def test_packaged_toml_matches_builtin_default():
    assert load_hod(default_hod_path()) == default_hod_model()
    assert load_hod(default_hod_model().to_dict()) == default_hod_model()


def _with(threshold_index, **changes):
    data = {**DEFAULT_HOD, "threshold": [dict(t) for t in DEFAULT_HOD["threshold"]]}
    data["threshold"][threshold_index].update(changes)
    return data


@pytest.mark.parametrize("changes,key", [
    ({"sigma_logm": 0.0}, "sigma_logm"),
    ({"sigma_logm": -0.2}, "sigma_logm"),
    ({"alpha": -0.5}, "alpha"),
    ({"log_mmin": 1.2e12}, "log_mmin"),
    ({"log_mmin": 11.0}, "not nested"),   # brighter threshold with more centrals
])
def test_bad_hod_parameters_raise_input_error(changes, key):
    with pytest.raises(InputError, match=key):
        load_hod(_with(1, **changes))


def test_bad_hod_file_errors(tmp_path):
    bad = tmp_path / "hod.toml"
    bad.write_text("[[threshold]]\nmag_max = -20\nlog_mmin = 12\n")
    with pytest.raises(InputError, match="missing key"):
        load_hod(bad)
    bad.write_text("colour = 3\n")
    with pytest.raises(InputError, match="unknown key 'colour'"):
        load_hod(bad)
    with pytest.raises(InputError, match="a_cen"):
        load_hod({**DEFAULT_HOD, "assembly_bias": {"a_cen": 1.5}})
    with pytest.raises(InputError, match="not found"):
        load_hod(tmp_path / "missing.toml")


def test_hod_with_no_galaxies_is_input_error():
    rng = np.random.default_rng(3)
    halos = make_halos(np.full(500, 1e11), rng)
    with pytest.raises(InputError, match="no galaxy"):
        populate(halos, default_hod_model(), rng)


def test_thresholds_sorted_faintest_first():
    model = default_hod_model()
    rev = HODModel(tuple(reversed(model.thresholds)), AssemblyBias())
    assert list(rev.mag_limits) == [-19.5, -20.0, -20.5, -21.0]


def test_read_halo_catalog_keeps_extra_columns_for_assembly_bias(tmp_path):
    from conecheck.box import read_halo_catalog

    rng = np.random.default_rng(6)
    n = 4000
    path = tmp_path / "halos.npz"
    np.savez(path, x=rng.uniform(0, 100, n), y=rng.uniform(0, 100, n),
             z=rng.uniform(0, 100, n), vx=np.zeros(n), vy=np.zeros(n), vz=np.zeros(n),
             Mvir=10 ** rng.uniform(12, 14, n), age=rng.random(n))
    halos = read_halo_catalog(path, {"mass": "Mvir"}, box_size=100.0, redshift=0.1)
    assert np.array_equal(halos.column("age"), np.load(path)["age"])
    model = load_hod({**DEFAULT_HOD, "assembly_bias": {"a_cen": 0.5, "secondary": "age"}})
    box = populate(halos, model, rng)
    assert box.meta["HODMODEL"] == "erf_central_powerlaw_satellite+assembly_bias"
    with pytest.raises(InputError, match="box size"):
        read_halo_catalog(path, {"mass": "Mvir"}, redshift=0.1)
