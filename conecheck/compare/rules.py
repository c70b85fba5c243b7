"""Verdict rules: how an offset between box and cones becomes pass, warn or fail.

The rules below are the documented default; every threshold is a field of
:class:`VerdictRules` (the ``[verdict]`` table of the configuration, keys = field names).
:data:`VERDICT_RULES_TEXT` holds the section below as plain text for the README and the
report.

Verdict rules
-------------
For every sample, redshift cut and statistic, the box vector b is compared bin by bin
with the mean c̄ of the N light cones. Two questions decide the verdict: does the offset
*matter* for a fit (is it outside the error bar the fit will use?), and is it *real* (larger
than this run's own uncertainty of the offset?).

Quantities

* Offset Δ = c̄ − b and fractional offset Δ/b (undefined where b = 0).
* Total error C_tot = C_box + C_cone: the box's jackknife covariance plus the mean of the
  cones' own jackknife covariances, i.e. the error budget of one survey-like data set.
  σ_tot = √diag(C_tot) and z_i = Δ_i / σ_tot,i (the offset in units of that error bar).
* σ_Δ, the uncertainty of the offset itself. Given the box, the cones are independent draws
  (each has its own observer, rotation and random numbers), so the cone mean scatters by
  S/N about what an average over every possible cone would give, S being the cone-to-cone
  sample covariance. Two parts of the box value that no cone shares are added: the box
  estimator's own sampling noise (the VPF's random spheres) and its line of sight — the box
  is measured along one axis, the cones along every direction — estimated by the spread τ²
  of the box value over its three axes: σ_Δ² = diag(S)/N + sampling variance + τ². With
  ``cones_independent = true`` (one box per cone) the box is one more independent
  realisation: σ_Δ² = diag(C_box) + diag(S)/N. S has N − 1 degrees of freedom and τ² two, so
  t = Δ/σ_Δ follows Student's t law with Welch–Satterthwaite degrees of freedom; the
  significance used below is its Gaussian equivalent (same two-sided tail probability).
  Where every cone gives the same value (an empty tail bin), and with one cone, σ_Δ is the
  upper bound diag(C_box) + diag(C_cone)/``effective_cones`` (plus the binomial noise of the
  cones' trials for count distributions) and the significance is Gaussian; one cone can at
  best warn. benchmarks/RESULTS.md gives the calibration over independent boxes.
* Bias χ² = Δᵀ Ĉ⁻¹ Δ over the p usable bins, with the inverse de-biased by the Hartlap
  factor: Ĉ⁻¹ = (n − p − 2)/(n − 1) · C_tot⁻¹ (Hartlap, Simon & Schneider 2007, A&A 464,
  399); n is the smaller of the box's and the cones' number of jackknife regions. Its
  p-value comes from Hotelling's T² law for a covariance estimated with n − 1 degrees of
  freedom (Hotelling 1931, Ann. Math. Stat. 2, 360; cf. Sellentin & Heavens 2016, MNRAS
  456, L132), not the χ² law, whose tail is too light. With a pseudo-inverse, p is its
  rank. A comparison needs n ≥ p + 3 regions and refuses otherwise. For a linear model,
  √χ² bounds the shift of any fitted parameter in units of its error.
* Detectable offset, per bin: the smallest |Δ| that would fail, the larger of
  ``z_fail`` × σ_tot and the offset that reaches ``n_sigma_offset`` under the t law. Per
  statistic, the smallest fractional bias common to every bin that would fail (the minimum
  over bins of the detectable fraction).

Verdict per statistic

* FAIL when some bin's offset matters, |z_i| > ``z_fail`` (default 1: outside the total
  error bar), and is real, significance > ``n_sigma_offset`` (default 3, Gaussian
  equivalent); or, with ``check_chi2`` (default true), when the bias χ² has p < ``p_fail``
  (default 0.001): the offset is significant against the data's own error bar.
* WARN when not failing and the run cannot tell: some bin's offset lies outside the total
  error bar but is not significant (the reason says how many cones would settle it if the
  offset stays as measured); fewer than ``min_cones`` cones (default 3: two cones give σ_Δ
  one degree of freedom); or a bin has an offset but zero error.
* PASS otherwise. Offsets that are real but inside the error bar are named in the reasons:
  they are too small to bias a fit at the survey's precision.

Parameter shifts (boxes built from halos + HOD): the derivatives D of every statistic with
respect to the sample's HOD parameters are taken on the box by central differences with
common random numbers; with the joint data-like covariance C_tot of a combination of
statistics, the offset moves the fitted parameters by δθ = F⁻¹ Dᵀ Ĉ⁻¹ Δ, F = Dᵀ Ĉ⁻¹ D,
reported in units of each parameter's forecast error √(F⁻¹)_jj. With
``max_parameter_shift`` > 0 a cut fails when some |δθ_j|/σ_j exceeds it. A box read from a
file has no HOD: only the bound √χ² on any parameter's shift is reported.

Roll-up: a redshift cut takes the worst verdict of its statistics and of its parameter-shift
rule (a cut with no statistics warns), a sample the worst of its cuts, the run the worst of
its samples (fail > warn > pass). Exit code: 1 when the run fails, 0 otherwise; with
``warn_is_failure = true`` a warn also exits 1.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import asdict, dataclass, fields
from typing import Any

from ..errors import InputError

PASS, WARN, FAIL = "pass", "warn", "fail"
#: Verdicts from best to worst.
VERDICTS = (PASS, WARN, FAIL)
_RANK = {v: i for i, v in enumerate(VERDICTS)}

_MARK = "Verdict rules\n-------------\n"
#: The rules section of this module's docstring, as plain text (README, report legend).
VERDICT_RULES_TEXT: str = _MARK + (__doc__ or "").split(_MARK, 1)[1].strip() + "\n"


@dataclass(frozen=True)
class VerdictRules:
    """Thresholds of the verdict rules (see the module notes); all fields simple types.

    Attributes
    ----------
    z_fail : float
        A bin's offset matters (lies outside the total error bar) when |z| > z_fail.
    n_sigma_offset : float
        An offset is real when its significance Δ/σ_Δ, converted from Student's t law with
        N − 1 degrees of freedom to its Gaussian equivalent, exceeds this.
    check_chi2 : bool
        Also fail on the bias χ² (Hotelling's law for the estimated covariance).
    p_fail : float
        Fail when the bias χ² p-value is below this (0 < p_fail < 1).
    min_cones : int
        Warn with fewer cones than this (≥ 1); N cones give σ_Δ N − 1 degrees of freedom.
    effective_cones : float
        N_eff of the one-cone upper bound on σ_Δ (used only when there is one cone), ≥ 1.
    max_parameter_shift : float
        When > 0 and the box was built from an HOD: a cut fails when the offset of a
        combination of its statistics would move some HOD parameter by more than this many
        forecast standard deviations (0: off, the shifts are only reported).
    warn_is_failure : bool
        Exit code 1 on an overall warn, too.
    """

    z_fail: float = 1.0
    n_sigma_offset: float = 3.0
    check_chi2: bool = True
    p_fail: float = 0.001
    min_cones: int = 3
    effective_cones: float = 1.0
    max_parameter_shift: float = 0.0
    warn_is_failure: bool = False

    def __post_init__(self) -> None:
        problems = []
        for f in fields(self):
            v = getattr(self, f.name)
            want = f.type if isinstance(f.type, str) else f.type.__name__
            if want == "bool":
                ok = isinstance(v, bool)
            elif want == "int":
                ok = isinstance(v, int) and not isinstance(v, bool)
            else:
                ok = (isinstance(v, (int, float)) and not isinstance(v, bool)
                      and math.isfinite(v))
            if not ok:
                problems.append(f"verdict.{f.name}: expected {want}, got {v!r}")
        if problems:
            raise InputError("; ".join(problems), problems=problems)
        checks = [("z_fail", self.z_fail > 0, "> 0"),
                  ("n_sigma_offset", self.n_sigma_offset > 0, "> 0"),
                  ("p_fail", 0 < self.p_fail < 1, "between 0 and 1 (exclusive)"),
                  ("min_cones", self.min_cones >= 1, "≥ 1"),
                  ("effective_cones", self.effective_cones >= 1, "≥ 1"),
                  ("max_parameter_shift", self.max_parameter_shift >= 0, "≥ 0 (0: off)")]
        problems = [f"verdict.{name}: expected a value {want}, got {getattr(self, name)!r}"
                    for name, ok, want in checks if not ok]
        if problems:
            raise InputError("; ".join(problems), problems=problems)

    @classmethod
    def from_mapping(cls, table: Mapping[str, Any] | None) -> VerdictRules:
        """Build from a config table (keys = field names); unknown keys are an InputError."""
        table = dict(table or {})
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(table) - known)
        if unknown:
            problems = [f"verdict.{k}: unknown key (expected one of {', '.join(sorted(known))})"
                        for k in unknown]
            raise InputError("; ".join(problems), problems=problems)
        return cls(**table)

    def to_dict(self) -> dict[str, Any]:
        """Plain dict of the fields (for results.json)."""
        return asdict(self)


def check_verdict(verdict: str, where: str = "verdict") -> str:
    """Return ``verdict`` if it is one of :data:`VERDICTS`, else raise InputError."""
    if verdict not in _RANK:
        raise InputError(f"{where}: expected one of {', '.join(VERDICTS)}, got {verdict!r}")
    return verdict


def worst_verdict(verdicts: Iterable[str], empty: str = PASS) -> str:
    """The worst of ``verdicts`` (fail > warn > pass); ``empty`` when there are none."""
    vs = [check_verdict(v) for v in verdicts]
    return max(vs, key=_RANK.__getitem__) if vs else empty


def exit_code(overall: str, warn_is_failure: bool = False) -> int:
    """Process exit code of a finished run: 1 on fail (and on warn if asked), else 0."""
    check_verdict(overall, "overall verdict")
    if overall == FAIL or (warn_is_failure and overall == WARN):
        return 1
    return 0
