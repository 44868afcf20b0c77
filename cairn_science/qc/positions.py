"""Electrode positions: the template fallback, neighbours and spherical-spline interpolation."""

from __future__ import annotations

import functools
from collections.abc import Mapping, Sequence

import mne
import numpy as np
from numpy.polynomial import legendre

from cairn_science.signal.prepare import CLASSIC_NAMES

# mne 1.13 calls its 10-20 template "colin27_1020"; earlier releases "standard_1020".
TEMPLATE_MONTAGES = ("colin27_1020", "standard_1020")

# Classic 10-20 names (CLASSIC_NAMES, kept with the signal preparation, which matches channel
# names without loading mne) and their modern equivalents (same electrode sites).
MODERN_NAMES = {modern: classic for classic, modern in CLASSIC_NAMES.items()}

SPLINE_STIFFNESS = 4
SPLINE_TERMS = 50
SPLINE_REGULARISATION = 1e-5


@functools.cache
def _template():
    available = mne.channels.get_builtin_montages()
    name = next(name for name in TEMPLATE_MONTAGES if name in available)
    positions = mne.channels.make_standard_montage(name).get_positions()["ch_pos"]
    return {key.lower(): np.asarray(value, dtype=float) for key, value in positions.items()}


def template_positions() -> dict[str, np.ndarray]:
    """{lower-case name: template position (m)} of every electrode of the 10-20 template."""
    return dict(_template())


def template_position(ch_name: str) -> np.ndarray | None:
    """Template 10-20 position (head frame, m) of an electrode name, or None.

    Matching ignores case; a classic name missing from the template (T3, T4, T5, T6) is
    looked up under its modern name, and the other way round.
    """
    template = _template()
    for candidate in (ch_name, CLASSIC_NAMES.get(ch_name), MODERN_NAMES.get(ch_name)):
        if candidate and candidate.lower() in template:
            return template[candidate.lower()]
    return None


def resolve_positions(ch_names: Sequence[str],
                      positions: Mapping[str, Sequence[float]] | None = None) -> np.ndarray:
    """Positions (n_channels, 3) in m for ``ch_names``; NaN rows where none is known.

    ``positions`` maps names to (x, y, z) in m (e.g. from electrodes.tsv); without it the
    template 10-20 positions are used by name.
    """
    out = np.full((len(ch_names), 3), np.nan)
    for index, name in enumerate(ch_names):
        if positions is not None:
            value = positions.get(name)
        else:
            value = template_position(name)
        if value is not None:
            value = np.asarray(value, dtype=float)
            if value.shape == (3,) and np.all(np.isfinite(value)):
                out[index] = value
    return out


def fit_sphere(points_m: np.ndarray) -> tuple[np.ndarray, float]:
    """Centre and radius (m) of the least-squares sphere through the points."""
    design = np.column_stack([2 * points_m, np.ones(len(points_m))])
    target = np.sum(points_m**2, axis=1)
    solution, *_ = np.linalg.lstsq(design, target, rcond=None)
    centre = solution[:3]
    radius = float(np.sqrt(solution[3] + centre @ centre))
    return centre, radius


def on_unit_sphere(points_m: np.ndarray) -> np.ndarray:
    """Directions of the electrodes from the centre of their best-fitting sphere.

    Falls back to the origin of the coordinate frame when fewer than four electrodes or a
    degenerate layout do not define a sphere.
    """
    centre = np.zeros(3)
    if len(points_m) >= 4:
        fitted, radius = fit_sphere(points_m)
        spread = np.ptp(points_m, axis=0).max()
        if np.isfinite(radius) and 0 < radius < 10 * spread:
            centre = fitted
    directions = points_m - centre
    return directions / np.linalg.norm(directions, axis=1, keepdims=True)


def nearest_neighbours(points_m: np.ndarray, *, n_neighbours: int) -> np.ndarray:
    """Index pairs (i, j), i < j, where j is among the ``n_neighbours`` nearest of i or i of j.

    Rows with NaN positions have no neighbours.
    """
    known = np.flatnonzero(np.all(np.isfinite(points_m), axis=1))
    if known.size < 2:
        return np.empty((0, 2), dtype=int)
    distance = np.linalg.norm(points_m[known, None] - points_m[None, known], axis=-1)
    np.fill_diagonal(distance, np.inf)
    k = min(n_neighbours, known.size - 1)
    nearest = np.argsort(distance, axis=1)[:, :k]
    pairs = {
        tuple(sorted((int(known[i]), int(known[j])))) for i in range(known.size) for j in nearest[i]
    }
    return np.array(sorted(pairs), dtype=int).reshape(-1, 2)


def _spline_kernel(cosine):
    """Spherical-spline kernel g(cos angle) of stiffness 4 (a Legendre series)."""
    orders = np.arange(1, SPLINE_TERMS + 1)
    coefficients = (2 * orders + 1) / (
        (orders * (orders + 1)) ** SPLINE_STIFFNESS * 4 * np.pi
    )
    return legendre.legval(np.clip(cosine, -1.0, 1.0), np.concatenate([[0.0], coefficients]))


def spline_interpolation_matrix(from_unit: np.ndarray, to_unit: np.ndarray, *,
                                regularisation: float = SPLINE_REGULARISATION) -> np.ndarray:
    """Matrix (n_to, n_from) that maps signals at ``from_unit`` to ``to_unit`` by spherical
    splines; both are unit vectors.

    ``from_unit`` may carry leading batch axes (..., n_from, 3) with ``to_unit`` as
    (..., n_to, 3), to build many small interpolators in one call.
    """
    kernel_from = _spline_kernel(from_unit @ np.swapaxes(from_unit, -1, -2))
    kernel_to = _spline_kernel(to_unit @ np.swapaxes(from_unit, -1, -2))
    n_from = from_unit.shape[-2]
    kernel_from = kernel_from + regularisation * np.eye(n_from)
    batch = kernel_from.shape[:-2]
    system = np.zeros((*batch, n_from + 1, n_from + 1))
    system[..., :n_from, :n_from] = kernel_from
    system[..., :n_from, n_from] = 1.0
    system[..., n_from, :n_from] = 1.0
    system_inverse = np.linalg.pinv(system)
    rows = np.concatenate([kernel_to, np.ones((*kernel_to.shape[:-1], 1))], axis=-1)
    return rows @ system_inverse[..., :, :n_from]
