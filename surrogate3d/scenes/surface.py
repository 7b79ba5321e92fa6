"""Surface albedo maps: one surface, smooth patches of two surfaces, or a coastline between them.

The scene's ``surface_albedo`` may vary from column to column.  A
:class:`SurfacePattern` says how a second surface (``contrast_albedo``) shares the
domain with the first (the scene's ``surface_albedo``): as smooth random patches that
blend one into the other, or as a strip of the second surface between two coastlines
(sharp edges, wiggled by a power-law random field, as coastlines are fractal:
Mandelbrot 1967).  Both are periodic, like the scene.  The surface's broadband longwave
emissivity shares the pattern: a number, or the value of a kind of surface
(:data:`SURFACE_LONGWAVE_EMISSIVITY`).
"""

import math
from dataclasses import dataclass, fields

import numpy as np

from ..errors import ParameterError
from ..core.validation import check_number, check_option
from .random_fields import gaussian_random_field

#: Pattern kinds.
SURFACE_PATTERNS = ("uniform", "patches", "coastline")
#: Directions of a coastline strip, as (m, n) of the stripes ``m x / Lx + n y / Ly``:
#: along y, along x and the two diagonals, the directions that stay periodic.
COAST_DIRECTIONS = ((1, 0), (0, 1), (1, 1), (1, -1))
#: Broadband longwave (thermal infrared) emissivity [1] of kinds of surface, from memory,
#: of the order of the broadband values of Wilber et al. (1999): water 0.99 (a little
#: less at grazing angles), green vegetation 0.98, sand desert about 0.90 (quartz has a
#: reststrahlen band at 8-10 um), fresh snow 0.99.
SURFACE_LONGWAVE_EMISSIVITY = {"ocean": 0.99, "vegetation": 0.98, "desert": 0.90, "snow": 0.99}


@dataclass(frozen=True)
class SurfacePattern:
    """How a second surface shares the domain with the first.

    Attributes
    ----------
    kind : str
        ``"uniform"`` (the first surface everywhere), ``"patches"`` or ``"coastline"``.
    contrast_albedo : float, sequence or dict
        Albedo of the second surface [1]: one value, one per band, or band -> value.
    scale : float
        Length [m]: the outer scale of the patches, or of the coastline's wiggles (whose
        standard deviation, normal to the coast, is ``scale / 4``).
    fraction : float
        Share of the domain covered by the second surface in a coastline [1], in [0, 1].
    contrast_emissivity : float, str or None
        Broadband longwave emissivity of the second surface [1], in [0, 1], or a kind of
        surface of :data:`SURFACE_LONGWAVE_EMISSIVITY`; None: that of the first surface.

    Examples
    --------
    >>> SurfacePattern("coastline", 0.7, fraction=0.3).validate().fraction
    0.3
    """

    kind: str = "uniform"
    contrast_albedo: object = 0.0
    scale: float = 4000.0
    fraction: float = 0.5
    contrast_emissivity: object = None

    def validate(self, label="surface_pattern"):
        """Raise ParameterError naming the first parameter outside its range; return self."""
        check_option(f"{label} kind", self.kind, SURFACE_PATTERNS)
        check_number(f"{label} scale", self.scale, 0.0, 1e7, low_open=True)
        check_number(f"{label} fraction", self.fraction, 0.0, 1.0)
        if self.contrast_emissivity is not None:
            longwave_emissivity(self.contrast_emissivity, f"{label} contrast_emissivity")
        return self


def longwave_emissivity(value, label="surface_longwave_emissivity"):
    """A broadband longwave emissivity [1] given as a number or as a kind of surface.

    Parameters
    ----------
    value : float or str
        A number in [0, 1] or a key of :data:`SURFACE_LONGWAVE_EMISSIVITY`.
    label : str
        Its name in messages.

    Returns
    -------
    float

    Raises
    ------
    surrogate3d.errors.ParameterError
        Naming ``label``, the value and what is allowed.

    References
    ----------
    Wilber, A. C., D. P. Kratz and S. K. Gupta, 1999: Surface emissivity maps for use in
    satellite retrievals of longwave radiation. NASA Technical Publication 1999-209362.

    Examples
    --------
    >>> longwave_emissivity("desert"), longwave_emissivity(0.95)
    (0.9, 0.95)
    """
    if isinstance(value, str):
        return SURFACE_LONGWAVE_EMISSIVITY[check_option(label, value, SURFACE_LONGWAVE_EMISSIVITY)]
    return check_number(label, value, 0.0, 1.0)


def surface_pattern_from_dict(table, label="surface_pattern"):
    """A validated :class:`SurfacePattern` from a table (as in a TOML configuration).

    Raises
    ------
    surrogate3d.errors.ParameterError
        Unknown keys or values out of range.

    Examples
    --------
    >>> surface_pattern_from_dict({"kind": "patches", "contrast_albedo": 0.6}).kind
    'patches'
    """
    if isinstance(table, SurfacePattern):
        return table.validate(label)
    if not isinstance(table, dict):
        raise ParameterError(f"{label} must be a table with kind, contrast_albedo, scale, fraction; got {table!r}")
    allowed = [f.name for f in fields(SurfacePattern)]
    unknown = sorted(set(table) - set(allowed))
    if unknown:
        raise ParameterError(f"{label} has unknown key {unknown[0]!r}; allowed: {', '.join(allowed)}")
    return SurfacePattern(**table).validate(label)


def albedo_map(albedo, contrast, pattern, shape, dx, rng):
    """Per-band surface albedo of every column.

    Any property of the surfaces that shares their pattern (the longwave emissivity) may
    be added as one more "band": the draws do not depend on the number of bands.

    Parameters
    ----------
    albedo, contrast : numpy.ndarray, shape (nband,)
        Albedo [1] of the first and second surface.
    pattern : SurfacePattern
        How they share the domain.
    shape : tuple of int
        ``(ny, nx)``.
    dx : float
        Cell size [m].
    rng : numpy.random.Generator

    Returns
    -------
    albedo : numpy.ndarray, shape (nband, ny, nx)
        [1], between the two surfaces' values.
    drawn : dict
        The values drawn from ``rng`` (coast direction and offset).

    References
    ----------
    Mandelbrot, B. (1967), How long is the coast of Britain? Statistical self-similarity
    and fractional dimension, Science 156, 636-638.

    Examples
    --------
    >>> from surrogate3d.scenes.random_fields import random_generator
    >>> a, drawn = albedo_map(np.array([0.06]), np.array([0.8]), SurfacePattern("coastline", 0.8, fraction=0.25),
    ...                       (40, 40), 100.0, random_generator(0))
    >>> a.shape, sorted(np.unique(a).tolist()), drawn["coast_direction"]
    ((1, 40, 40), [0.06, 0.8], [1, -1])
    """
    ny, nx = shape
    albedo = np.asarray(albedo, dtype=np.float64)[:, None, None]
    contrast = np.asarray(contrast, dtype=np.float64)[:, None, None]
    if pattern.kind == "uniform":
        return np.broadcast_to(albedo, albedo.shape[:1] + tuple(shape)).copy(), {}
    if pattern.kind == "patches":
        # A smooth field (E(k) ~ k**-5 beyond the outer scale, so that gradients stay finite
        # at the grid scale) squashed into (0, 1): the share of the second surface.
        smooth = gaussian_random_field(shape, dx, dx, rng, spectral_exponent=5.0, outer_scale=pattern.scale)
        share = 0.5 * (1.0 + np.tanh(smooth))
        return albedo + (contrast - albedo) * share[None], {}
    m, n = COAST_DIRECTIONS[int(rng.integers(len(COAST_DIRECTIONS)))]
    offset = float(rng.uniform())
    width, height = nx * dx, ny * dx
    x = ((np.arange(nx) + 0.5) * dx)[None, :]
    y = ((np.arange(ny) + 0.5) * dx)[:, None]
    stripe_period = 1.0 / math.hypot(m / width, n / height)
    wiggle = 0.25 * pattern.scale * gaussian_random_field(shape, dx, dx, rng, outer_scale=pattern.scale)
    phase = (m * x / width + n * y / height + offset + wiggle / stripe_period) % 1.0
    second = phase < pattern.fraction
    return np.where(second[None], contrast, albedo), {"coast_direction": [m, n], "coast_offset": offset}
