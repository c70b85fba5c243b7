"""Gaussian and lognormal fields on a periodic FFT grid, linear velocities, point sampling.

The Gaussian field δ_G is built from unit white noise w on an N³ grid of side L:
δ̃_G(k) = w̃(k) √(P(k) / V_cell) with numpy's unnormalised forward FFT, so that
⟨|δ̃_G|²⟩ = N³ P(k)/V_cell, i.e. the field's power spectrum is P(k).  Starting from
real-space white noise makes the Hermitian symmetry exact for free.  The field's variance on
the grid is σ² = (1/V) Σ_k P(k) over the grid modes (:func:`expected_variance`).

A lognormal density ρ ∝ exp(g) (Coles & Jones 1991, MNRAS 248, 1) is positive by
construction; its mean is fixed by normalising the weights, which is the same as using
exp(g − σ_g²/2).  For a tracer of bias b, g is drawn from the *same* white noise with the
spectrum that makes exp(g) have exactly b² times the linear spectrum on the grid
(:func:`lognormal_filter`).

Linear velocities (peculiar, km/s) follow from the continuity equation,
v(k) = i a H(z) f(z) δ̃(k) k / k², with k in h/Mpc and a H in km/s/(Mpc/h).

Grid values are taken to sit at cell centres (i + ½)·L/N; points drawn in cell i are uniform
inside it, and cloud-in-cell interpolation uses the same convention.

Units: lengths Mpc/h, k in h/Mpc, P in (Mpc/h)³, velocities km/s.
"""

from __future__ import annotations

import os
from collections.abc import Callable

import numba
import numpy as np
import scipy.fft
from numba import prange
from numpy.typing import NDArray

from ..errors import InputError

PowerFn = Callable[[NDArray[np.float64]], NDArray[np.float64]]

#: Smallest cell side accepted [Mpc/h]: finer grids resolve nothing a linear field holds.
MIN_CELL = 0.5
#: Largest grid accepted (memory: a 1024³ float32 field is 4 GB).
MAX_GRID = 1024


def _workers(workers: int | None) -> int:
    return workers if workers else max(1, min(os.cpu_count() or 1, 8))


def check_grid(box_size: float, grid: int) -> None:
    """Refuse grids that are odd, tiny, huge or finer than :data:`MIN_CELL` Mpc/h."""
    if isinstance(grid, bool) or not isinstance(grid, (int, np.integer)):
        raise InputError(f"grid = {grid!r}: expected an even integer number of cells per side")
    if not (np.isfinite(box_size) and box_size > 0):
        raise InputError(f"box_size = {box_size!r}: must be > 0 Mpc/h")
    if grid < 8 or grid % 2:
        raise InputError(f"grid = {grid}: expected an even number of cells per side, >= 8")
    if grid > MAX_GRID:
        raise InputError(f"grid = {grid}: more than {MAX_GRID} cells per side would need "
                         f"{4 * grid**3 / 1e9:.0f} GB per field")
    if box_size / grid < MIN_CELL:
        raise InputError(f"box_size = {box_size:g} Mpc/h is too small for grid = {grid}: cells "
                         f"of {box_size / grid:.3g} Mpc/h are below the {MIN_CELL} Mpc/h minimum; "
                         f"use grid <= {int(box_size / MIN_CELL) // 2 * 2} or a larger box")


def default_grid(box_size: float, cell: float = 2.0, max_grid: int = 256) -> int:
    """An even, FFT-friendly grid with cells of about ``cell`` Mpc/h, at most ``max_grid``."""
    n = max(16, int(np.ceil(box_size / cell)))
    n = scipy.fft.next_fast_len(n + (n % 2))
    while n % 2:
        n = scipy.fft.next_fast_len(n + 1)
    return int(min(n, max_grid))


def wavenumbers(grid: int, box_size: float) -> tuple[NDArray[np.float32], ...]:
    """(kx, ky, kz) in h/Mpc for the rfftn layout, broadcastable to (N, N, N/2+1)."""
    k = (2.0 * np.pi * np.fft.fftfreq(grid, d=box_size / grid)).astype(np.float32)
    kz = (2.0 * np.pi * np.fft.rfftfreq(grid, d=box_size / grid)).astype(np.float32)
    return k[:, None, None], k[None, :, None], kz[None, None, :]


def k_magnitude(grid: int, box_size: float) -> NDArray[np.float32]:
    """|k| in h/Mpc on the rfftn layout, shape (N, N, N/2+1)."""
    kx, ky, kz = wavenumbers(grid, box_size)
    return np.sqrt(kx**2 + ky**2 + kz**2)


def mode_weights(grid: int) -> NDArray[np.float32]:
    """Multiplicity of each rfftn mode in the full grid (1 on the kz = 0 and Nyquist planes)."""
    w = np.full(grid // 2 + 1, 2.0, dtype=np.float32)
    w[0] = 1.0
    w[-1] = 1.0
    return w[None, None, :]


def expected_variance(grid: int, box_size: float, power: PowerFn) -> float:
    """Variance of a Gaussian field with spectrum P on this grid, σ² = Σ_k P(k) / V."""
    k = k_magnitude(grid, box_size).astype(np.float64)
    p = np.where(k > 0, power(np.where(k > 0, k, 1.0)), 0.0)
    return float(np.sum(p * mode_weights(grid)) / box_size**3)


def white_noise_k(grid: int, rng: np.random.Generator,
                  workers: int | None = None) -> NDArray[np.complex64]:
    """rfftn of unit-variance real white noise on an N³ grid (⟨|w̃|²⟩ = N³)."""
    noise = rng.standard_normal((grid, grid, grid), dtype=np.float32)
    return scipy.fft.rfftn(noise, workers=_workers(workers))


def power_amplitude(grid: int, box_size: float, power: PowerFn) -> NDArray[np.float32]:
    """√(P(k)/V_cell) on the rfftn layout (zero at k = 0): multiplies white noise into δ̃."""
    k = k_magnitude(grid, box_size)
    cell_volume = (box_size / grid) ** 3
    # P is smooth in log-log: tabulate it once instead of evaluating it on N³ modes
    k_tab = np.geomspace(2.0 * np.pi / box_size * 0.99, float(k.max()) * 1.01, 4096)
    log_amp = 0.5 * np.log(power(k_tab) / cell_volume)
    amp = np.exp(np.interp(np.log(np.where(k > 0, k, k_tab[0])), np.log(k_tab), log_amp))
    return np.where(k > 0, amp, 0.0).astype(np.float32)


def gaussian_field_k(grid: int, box_size: float, power: PowerFn, rng: np.random.Generator,
                     workers: int | None = None) -> NDArray[np.complex64]:
    """Fourier modes (rfftn layout, unnormalised) of a Gaussian field with spectrum P(k).

    Parameters
    ----------
    grid : int
        Cells per side (even).
    box_size : float
        Box side, Mpc/h.
    power : callable
        P(k) in (Mpc/h)³ for k in h/Mpc (already at the wanted redshift).
    rng : numpy.random.Generator
        Source of the white noise.
    """
    check_grid(box_size, grid)
    field = white_noise_k(grid, rng, workers)
    field *= power_amplitude(grid, box_size, power)
    return field


def lognormal_filter(amp2: NDArray[np.float32], bias: float, grid: int,
                     workers: int | None = None) -> tuple[NDArray[np.float32], float]:
    """Filter turning white noise into the Gaussian field g of a lognormal tracer.

    The tracer density 1 + δ_t = exp(g)/⟨exp(g)⟩ has, on the grid, the covariance
    exp(C_g) − 1.  Asking it to equal b² C_s, with C_s the covariance of the (smoothed)
    linear field of spectrum ``amp2`` · V_cell, gives C_g = ln(1 + b² C_s), evaluated on the
    grid by FFT (the standard lognormal-mock construction: Coles & Jones 1991; e.g.
    Agrawal et al. 2017, JCAP 10, 003).  Its spectrum is clipped at zero where the transform
    goes slightly negative, and b² C_s at −0.99 where ln would be undefined.

    Parameters
    ----------
    amp2 : array
        P_s(k)/V_cell on the rfftn layout (the square of :func:`power_amplitude`, times any
        smoothing window squared).
    bias : float
        Linear bias b of the tracer.

    Returns
    -------
    filter : array
        √(max(FFT[C_g], 0)) on the rfftn layout: g̃ = w̃ · filter.
    variance : float
        Variance of g on the grid, C_g(0).
    """
    cov = scipy.fft.irfftn(amp2, s=(grid, grid, grid), workers=_workers(workers))
    cov *= np.float32(bias**2)
    np.maximum(cov, np.float32(-0.99), out=cov)
    np.log1p(cov, out=cov)
    variance = float(cov[0, 0, 0])
    spec = scipy.fft.rfftn(cov, workers=_workers(workers)).real
    del cov
    np.maximum(spec, 0.0, out=spec)
    spec[0, 0, 0] = 0.0
    return np.sqrt(spec, out=spec).astype(np.float32, copy=False), variance


def to_real(field_k: NDArray[np.complex64], grid: int, smoothing: float = 0.0,
            box_size: float | None = None, workers: int | None = None) -> NDArray[np.float32]:
    """Real-space field, optionally smoothed with a Gaussian of radius ``smoothing`` [Mpc/h]."""
    if smoothing > 0:
        if box_size is None:
            raise ValueError("box_size is needed to smooth")
        k = k_magnitude(grid, box_size)
        field_k = field_k * np.exp(-0.5 * (k * np.float32(smoothing)) ** 2)
    return scipy.fft.irfftn(field_k, s=(grid, grid, grid), workers=_workers(workers))


def measure_power(field: NDArray[np.floating], box_size: float, k_edges: NDArray[np.float64],
                  workers: int | None = None
                  ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Shell-averaged power spectrum of a real grid field.

    Returns
    -------
    k_mean, power, n_modes
        Mode-weighted mean |k| [h/Mpc], P [(Mpc/h)³] and the number of modes per shell
        (counting ±k once each, so independent modes are about n_modes / 2).
    """
    grid = field.shape[0]
    fk = scipy.fft.rfftn(field, workers=_workers(workers))
    p = (np.abs(fk) ** 2).astype(np.float64) * box_size**3 / grid**6
    k = k_magnitude(grid, box_size).astype(np.float64)
    w = np.broadcast_to(mode_weights(grid), k.shape).astype(np.float64)
    which = np.digitize(k.ravel(), k_edges) - 1
    ok = (which >= 0) & (which < len(k_edges) - 1)
    nb = len(k_edges) - 1
    n_modes = np.bincount(which[ok], w.ravel()[ok], nb)
    k_sum = np.bincount(which[ok], (w * k).ravel()[ok], nb)
    p_sum = np.bincount(which[ok], (w * p).ravel()[ok], nb)
    with np.errstate(invalid="ignore", divide="ignore"):
        return k_sum / n_modes, p_sum / n_modes, n_modes


def linear_velocity(field_k: NDArray[np.complex64], box_size: float, factor: float,
                    workers: int | None = None) -> NDArray[np.float32]:
    """Linear peculiar-velocity grids v = i·factor·δ̃ k/k², shape (3, N, N, N), km/s.

    ``factor`` is a H(z) f(z) in km/s/(Mpc/h).  Nyquist modes of each derivative are zeroed
    so the result is exactly real.
    """
    grid = field_k.shape[0]
    ks = wavenumbers(grid, box_size)
    k2 = ks[0] ** 2 + ks[1] ** 2 + ks[2] ** 2
    k2 = np.where(k2 > 0, k2, np.float32(1.0))
    out = np.empty((3, grid, grid, grid), dtype=np.float32)
    for axis, ki in enumerate(ks):
        ki = ki.copy()
        ki[_nyquist_index(axis, ki.shape)] = 0.0
        vk = field_k * (1j * np.float32(factor) * ki / k2).astype(np.complex64)
        out[axis] = scipy.fft.irfftn(vk, s=(grid, grid, grid), workers=_workers(workers))
    return out


def _nyquist_index(axis: int, shape: tuple[int, ...]) -> tuple[int | slice, ...]:
    # fftfreq puts the Nyquist frequency at N/2 on the full axes; rfftfreq at the last index
    index: list[int | slice] = [slice(None)] * 3
    index[axis] = shape[axis] // 2 if axis < 2 else shape[axis] - 1
    return tuple(index)


def cic_interpolate(fields: NDArray[np.floating], positions: NDArray[np.float64],
                    box_size: float) -> NDArray[np.float64]:
    """Cloud-in-cell interpolation of grid fields (C, N, N, N) at positions (n, 3) [Mpc/h].

    Returns an (n, C) array.  Periodic; grid values sit at cell centres.
    """
    grid = fields.shape[-1]
    flat_fields = np.ascontiguousarray(fields.reshape(fields.shape[0], -1))
    positions = np.ascontiguousarray(positions, dtype=np.float64)
    return _cic_kernel(flat_fields, positions, float(box_size / grid), int(grid))


@numba.njit(parallel=True, cache=True)
def _cic_kernel(flat_fields, positions, cell, grid):
    """The eight corner weights of each position, added corner by corner (x slowest, then
    y, then z) in float64, one point per iteration: the same operations in the same order as
    the vectorised form this replaced (bit-identical results), 4 times faster on 3.8·10⁶
    halos."""
    n = positions.shape[0]
    n_fields = flat_fields.shape[0]
    out = np.zeros((n, n_fields))
    for p in prange(n):
        ux = positions[p, 0] / cell - 0.5
        uy = positions[p, 1] / cell - 0.5
        uz = positions[p, 2] / cell - 0.5
        kx = np.int64(np.floor(ux))
        ky = np.int64(np.floor(uy))
        kz = np.int64(np.floor(uz))
        fx, fy, fz = ux - kx, uy - ky, uz - kz
        x0, y0, z0 = kx % grid, ky % grid, kz % grid
        x1, y1, z1 = (x0 + 1) % grid, (y0 + 1) % grid, (z0 + 1) % grid
        for cx in range(2):
            ix = x1 if cx else x0
            wx = fx if cx else 1.0 - fx
            for cy in range(2):
                iy = y1 if cy else y0
                wy = fy if cy else 1.0 - fy
                base = (ix * grid + iy) * grid
                wxy = wx * wy
                for cz in range(2):
                    iz = z1 if cz else z0
                    wz = fz if cz else 1.0 - fz
                    w = wxy * wz
                    for c in range(n_fields):
                        out[p, c] += w * np.float64(flat_fields[c, base + iz])
    return out


def sample_in_cells(weights: NDArray[np.floating], n: int, box_size: float,
                    rng: np.random.Generator) -> tuple[NDArray[np.float64], NDArray[np.int64]]:
    """Draw n points, each cell chosen with probability ∝ weight, uniform inside the cell.

    A Poisson total with a multinomial split over cells is the same as independent Poisson
    counts per cell of mean ∝ weight, so this is Poisson sampling of the density without
    drawing one number per cell.

    Returns
    -------
    positions : (n, 3) array in [0, box_size), Mpc/h
    cells : (n,) flat cell indices
    """
    grid = weights.shape[0]
    cdf = weights.ravel().astype(np.float64)     # a mixed-dtype cumsum is ~5x slower
    np.cumsum(cdf, out=cdf)
    # sorted keys make the search cache-friendly; the permutation restores random order
    keys = np.sort(rng.random(n)) * cdf[-1]
    cells = np.searchsorted(cdf, keys, side="right")[rng.permutation(n)]
    cells = np.minimum(cells, cdf.size - 1)
    ijk = np.column_stack(np.unravel_index(cells, weights.shape))
    pos = (ijk + rng.random((n, 3))) * (box_size / grid)
    pos[pos >= box_size] = 0.0
    return pos, cells.astype(np.int64)
