"""Stacking spectra in production-rate units over lines and epochs.

Each aperture spectrum is divided by its model response (flux per unit Q for
that line, epoch geometry and temperature) and by the fraction of the line the
integration window captures, so that its window integral estimates Q directly.
The rescaled spectra are rebinned flux-conservingly onto one velocity grid in
the target's frame and combined with inverse-variance weights, one weight per
spectrum from its empirical window noise. Combining epochs assumes Q was
constant over them; per-epoch stacks are kept too.

Infrared bands are unresolved at the resolving powers of integral-field
spectrographs: they enter as Q estimates without a velocity spectrum
(``velocity`` and ``density`` None), combined with the lines' window estimates
in the inverse-variance mean of Q but not in the stacked spectrum.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from pipeline.errors import CoverageError
from pipeline.rates.statistics import inverse_variance_mean

__all__ = ["StackInput", "rebin_density", "velocity_grid", "combine", "shared_apertures", "distinct_windows",
           "combine_distributed"]


@dataclass(frozen=True)
class StackInput:
    """One line's aperture spectra from one cube, already in Q units.

    Arrays are plain floats: velocities in km/s, Q densities in (1/s) per
    (km/s), Q in 1/s. Shapes: ``density`` (n_T, n_ap, n_chan); ``q`` and
    ``sigma_q`` (n_T, n_ap).
    """

    epoch: str
    cube_id: str
    line_id: str
    velocity: np.ndarray
    density: np.ndarray
    q: np.ndarray
    sigma_q: np.ndarray
    radius_km: np.ndarray       # (n_ap,) aperture radii at the target
    apertures: tuple[str, ...] = ()   # (n_ap,) the apertures as configured ('1000 km', '2 arcsec'); () = by radius
    curve: np.ndarray | None = None   # (n_grid, n_ap) window flux per unit Q on the temperature grid (lines only)
    window: float = float("nan")      # half-width of the integration window [km/s] (lines only)
    distributed_ratio: np.ndarray | None = None   # (n_ap,) response under a distributed source / nucleus source
    nonlte_curve: np.ndarray | None = None   # (n_grid, n_ap) as ``curve`` under the non-LTE comparison's excitation

    @property
    def labels(self) -> tuple[str, ...]:
        """The apertures' names (from the radii in km when none were given)."""
        return self.apertures or tuple(f"{float(r):g} km" for r in self.radius_km)


def shared_apertures(inputs: list[StackInput], what: str = "stack") -> tuple[list[StackInput], list[str]]:
    """The inputs cut to the apertures every one of them has, and one note per cube for the apertures left out.

    Cubes may have their own apertures (a small infrared field, a large millimetre one); a combination is only
    meaningful over apertures they share, named as configured (``'1000 km'``, ``'2 arcsec'``). The shared
    apertures keep the order of the first input.

    Raises
    ------
    CoverageError
        When the inputs share no aperture.
    """
    if not inputs:
        return [], []
    common = [a for a in inputs[0].labels if all(a in i.labels for i in inputs[1:])]
    if not common:
        have = "; ".join(dict.fromkeys(f"{i.cube_id}: {', '.join(i.labels)}" for i in inputs))
        msg = (f"{what}: the cubes share no aperture ({have}); expected at least one aperture common to every cube "
               "combined (set the cubes' apertures_km / apertures_arcsec)")
        raise CoverageError(msg)
    notes: dict[str, list[str]] = {}
    out = []
    for inp in inputs:
        idx = [inp.labels.index(a) for a in common]
        for a in inp.labels:
            if a not in common and a not in notes.setdefault(inp.cube_id, []):
                notes[inp.cube_id].append(a)
        if len(idx) == len(inp.labels):
            out.append(inp)
            continue
        out.append(replace(inp, q=inp.q[:, idx], sigma_q=inp.sigma_q[:, idx], radius_km=inp.radius_km[idx],
                           density=None if inp.density is None else inp.density[:, idx, :],
                           curve=None if inp.curve is None else inp.curve[:, idx], apertures=tuple(common),
                           nonlte_curve=None if inp.nonlte_curve is None else inp.nonlte_curve[:, idx],
                           distributed_ratio=None if inp.distributed_ratio is None else inp.distributed_ratio[idx]))
    return out, [f"{', '.join(a)} of {cube}" for cube, a in notes.items() if a]


def velocity_grid(inputs: list[StackInput], half_width: float) -> np.ndarray:
    """Channel edges (km/s) of a common grid: the coarsest input channel, centred on 0.

    Inputs without a spectrum (bands) are ignored; with none left the grid is one 1 km/s channel.
    """
    steps = [float(np.abs(np.median(np.diff(i.velocity)))) for i in inputs if i.velocity is not None]
    if not steps:
        return np.array([-0.5, 0.5])
    step = max(steps)
    n = int(np.floor(half_width / step))
    return (np.arange(-n, n + 2) - 0.5) * step


def rebin_density(velocity: np.ndarray, density: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Flux-conserving rebinning of a density spectrum (per km/s) onto bins ``edges``.

    The input is treated as constant over each of its channels; the output in
    each new bin is the integral over the bin divided by its width. Bins not
    fully covered by the input, or touching a blank channel, are NaN.
    Works along the last axis.
    """
    order = np.argsort(velocity)
    v = velocity[order]
    y = density[..., order]
    dv = np.abs(np.median(np.diff(v)))
    in_edges = np.concatenate([v - dv / 2, [v[-1] + dv / 2]])
    blank = ~np.isfinite(y)
    cum = np.concatenate([np.zeros(y.shape[:-1] + (1,)), np.cumsum(np.where(blank, 0.0, y) * dv, axis=-1)],
                         axis=-1)
    # blank channels are tracked per spectrum, so a blank in one row does not blank the others
    cum_blank = np.concatenate([np.zeros(y.shape[:-1] + (1,)), np.cumsum(blank, axis=-1)], axis=-1)
    at = np.apply_along_axis(lambda c: np.interp(edges, in_edges, c), -1, cum)
    out = np.diff(at, axis=-1) / np.diff(edges)
    covered = (edges[:-1] >= in_edges[0] - 1e-9) & (edges[1:] <= in_edges[-1] + 1e-9)
    nb = np.apply_along_axis(lambda c: np.interp(edges, in_edges, c), -1, cum_blank)
    touched = np.diff(nb, axis=-1) > 0
    out[..., ~covered] = np.nan
    out[touched] = np.nan
    return out


def combine(inputs: list[StackInput], edges: np.ndarray) -> dict[str, np.ndarray]:
    """Inverse-variance combination of inputs.

    Returns
    -------
    dict with
        ``density`` (n_T, n_ap, n_grid): weighted mean Q-density spectrum,
        ``q`` and ``sigma_q`` (n_T, n_ap): weighted mean of the inputs' window
        estimates and its error (Σ w)^-1/2, w = 1/σ_i²,
        ``weights`` (n_inputs, n_T, n_ap): normalised weights.
    """
    q = np.array([i.q for i in inputs])                                   # (n_in, n_T, n_ap)
    sigma_q = np.array([i.sigma_q for i in inputs])
    q_mean, sigma = inverse_variance_mean(q, sigma_q, axis=0)
    w = 1.0 / sigma_q**2                                                  # the same weights, for the spectra
    blank = np.full(q.shape[1:] + (edges.size - 1,), np.nan)
    rebinned = np.array([blank if i.velocity is None else rebin_density(i.velocity, i.density, edges)
                         for i in inputs])                                  # (n_in, T, ap, g); bands all NaN
    ww = np.where(np.isfinite(rebinned), w[..., None], 0.0)
    num = np.nansum(np.where(np.isfinite(rebinned), rebinned, 0.0) * ww, axis=0)
    den = ww.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        dens = np.where(den > 0, num / den, np.nan)
    return {"density": dens, "q": q_mean, "sigma_q": sigma, "weights": w / w.sum(axis=0)}


def distinct_windows(inputs: list[StackInput], catalogue) -> tuple[list[StackInput], list[str]]:
    """The inputs with at most one of several overlapping windows per cube, and a note for each one left out.

    Two lines of one cube whose integration windows overlap measure partly the same channels; their estimates
    are not independent, and a blend is already modelled in each window's response. The input with the smallest
    sigma_Q (first temperature and aperture) is kept.
    """
    c = 299792.458
    kept: list = []
    notes = []
    for inp in sorted(inputs, key=lambda i: (i.cube_id, float(i.sigma_q[0, 0]))):
        if inp.velocity is None:
            kept.append(inp)
            continue
        f = catalogue.get_line(inp.line_id).freq.value
        clash = None
        for other in kept:
            if other.cube_id != inp.cube_id or other.velocity is None:
                continue
            dv = abs(c * (1 - catalogue.get_line(other.line_id).freq.value / f))
            if dv < inp.window + other.window:
                clash = other
                break
        if clash is None:
            kept.append(inp)
        else:
            notes.append(f"{inp.cube_id}:{inp.line_id} (its window overlaps that of {clash.line_id}, kept)")
    order = {id(i): k for k, i in enumerate(inputs)}
    return sorted(kept, key=lambda i: order[id(i)]), notes


def combine_distributed(inputs: list[StackInput]) -> tuple[np.ndarray, np.ndarray] | None:
    """Q and sigma_Q (n_T, n_ap) under the distributed-source hypothesis: every input's estimate divided by its
    response ratio, inverse-variance combined; None unless every input has the ratio."""
    if not inputs or any(i.distributed_ratio is None for i in inputs):
        return None
    q = np.array([i.q / i.distributed_ratio[None, :] for i in inputs])
    s = np.array([i.sigma_q / i.distributed_ratio[None, :] for i in inputs])
    return inverse_variance_mean(q, s, axis=0)
