"""HOD models with one parameter varied: the box side of the parameter-shift forecast.

The derivative of a statistic with respect to an HOD parameter is taken by central finite
differences on the box, re-populating the same halos with the parameter moved by ± its step
and every random draw repeated (common random numbers), so that the difference measures the
parameter's effect rather than a new realisation of the occupation noise.

A sample is one luminosity threshold of the model: its parameters are the five occupation
parameters of Zheng et al. 2007 (ApJ 667, 760) for that threshold and the two decoration
strengths of Hearin et al. 2016 (MNRAS 460, 2552). The varied model holds that threshold
alone, so a step never breaks the nesting of the thresholds; its galaxies are the sample.
"""

from __future__ import annotations

import dataclasses
from types import MappingProxyType

from .hod import AssemblyBias, HODModel, HODThreshold, ZhengParams

#: The occupation parameters of one threshold, then the decoration strengths.
OCCUPATION_PARAMETERS = ("log_mmin", "sigma_logm", "log_m0", "log_m1", "alpha")
DECORATION_PARAMETERS = ("a_cen", "a_sat")

#: Half-width of the central difference of each parameter (dex for masses and widths).
#: Small against the parameters' typical uncertainties in luminosity-threshold fits (≈ 0.1
#: dex, common practice) so that the response is linear, large enough that occupation
#: noise (common random numbers leave only the halos near the thresholds) stays small.
DEFAULT_STEPS = MappingProxyType({"log_mmin": 0.05, "sigma_logm": 0.03, "log_m0": 0.1,
                                  "log_m1": 0.05, "alpha": 0.05, "a_cen": 0.2,
                                  "a_sat": 0.2})


def sample_threshold(model: HODModel, mag_max: float | None) -> HODThreshold | None:
    """The model's threshold whose ``mag_max`` is the sample's (None when there is none)."""
    if mag_max is None:
        return None
    for t in model.thresholds:
        if abs(t.mag_max - mag_max) < 1e-9:
            return t
    return None


def parameter_values(model: HODModel, threshold: HODThreshold,
                     with_decoration: bool) -> dict[str, float]:
    """Fiducial values of the sample's parameters (decoration only when asked)."""
    out = {name: float(getattr(threshold.params, name)) for name in OCCUPATION_PARAMETERS}
    if with_decoration:
        out.update({name: float(getattr(model.assembly_bias, name))
                    for name in DECORATION_PARAMETERS})
    return out


def varied_model(model: HODModel, threshold: HODThreshold, name: str | None = None,
                 value: float | None = None) -> HODModel:
    """The single-threshold model of the sample, with parameter ``name`` set to ``value``.

    ``name = None`` gives the fiducial single-threshold model. Decoration strengths are
    clipped to their physical range [−1, 1] (a one-sided step at the edge is still a
    difference of two different models, divided by the actual separation by the caller).
    """
    params, ab = threshold.params, model.assembly_bias
    if name in OCCUPATION_PARAMETERS:
        params = dataclasses.replace(params, **{name: float(value)})
    elif name in DECORATION_PARAMETERS:
        ab = dataclasses.replace(ab, **{name: float(min(max(value, -1.0), 1.0))})
    elif name is not None:
        raise ValueError(f"unknown HOD parameter {name!r}")
    return HODModel((HODThreshold(threshold.mag_max, ZhengParams(**dataclasses.asdict(params))),),
                    AssemblyBias(**dataclasses.asdict(ab)), model.concentration,
                    model.satellites_need_central, model.bright_tail_mag)


def step_values(model: HODModel, threshold: HODThreshold, name: str,
                step: float) -> tuple[float, float]:
    """(lower, upper) values of a central difference, kept inside the parameter's range."""
    fid = parameter_values(model, threshold, True)[name]
    lo, hi = fid - step, fid + step
    if name in DECORATION_PARAMETERS:
        lo, hi = max(lo, -1.0), min(hi, 1.0)
    if name == "sigma_logm":
        lo = max(lo, 0.5 * fid)
    if name == "alpha":
        lo = max(lo, 0.0)
    return lo, hi


__all__ = ["DECORATION_PARAMETERS", "DEFAULT_STEPS", "OCCUPATION_PARAMETERS",
           "parameter_values", "sample_threshold", "step_values", "varied_model"]
