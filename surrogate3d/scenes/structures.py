"""Horizontal cloud structures: the fields whose largest values become a layer's clouds.

A cloud layer without a structure takes its clouds from the isotropic power-law field of
:mod:`surrogate3d.scenes.random_fields`.  The structures here arrange clouds
differently: in clusters with clear gaps between them (:class:`ClusteredField`), in
streets along boundary-layer rolls (:class:`StreetField`), in open or closed mesoscale
cells (:class:`CellularField`), or as a deck whose liquid water follows a bounded
multiplicative cascade (:class:`CascadeField`).  Each makes a periodic field of zero mean
and unit standard deviation on the scene grid; the generator keeps the columns where it
is largest (so that the layer's cloud fraction is met exactly and ``edge_taper`` keeps
its meaning, in standard deviations of this field).  A structure may also give a
horizontal multiplier of the liquid water, of mean 1 over the domain.

Parameters are validated by :meth:`validate`, which names the parameter, its allowed
range and the value.  Directions left as ``None`` are drawn from the scene's seed, so
that a scene set meets every angle between the sun and the structure.
"""

import math
from dataclasses import dataclass, field, fields

import numpy as np

from ..core.validation import check_number, check_option
from ..errors import ParameterError
from .random_fields import bounded_cascade, gaussian_random_field


@dataclass(frozen=True)
class StructureFields:
    """What a structure gives the generator for one layer.

    Attributes
    ----------
    field : numpy.ndarray, shape (ny, nx)
        Zero mean, unit standard deviation; clouds go where it is largest.
    water_multiplier : numpy.ndarray or None
        Horizontal factor on the liquid water [1], mean 1 over the domain; ``None`` for 1.
    drawn : dict
        Values drawn from the seed (directions, counts), for the scene's record.
    """

    field: np.ndarray
    water_multiplier: np.ndarray | None = None
    drawn: dict = field(default_factory=dict)


def _standardise(values):
    """Zero mean and unit standard deviation (a constant field becomes zeros)."""
    values = values - values.mean()
    std = values.std()
    return values / std if std > 0 else values


def _wavevectors(shape, dx):
    """``kx``, ``ky`` [cycles m-1] on the ``rfft2`` grid, broadcastable to its shape."""
    ny, nx = shape
    return np.fft.rfftfreq(nx, d=dx)[None, :], np.fft.fftfreq(ny, d=dx)[:, None]


def _filter(values, amplitude, shape):
    """Periodic convolution: multiply the Fourier transform of ``values`` by ``amplitude``."""
    return np.fft.irfft2(np.fft.rfft2(values) * amplitude, s=shape)


def _rough(base, roughness, shape, dx, rng, outer_scale):
    """``base`` plus ``roughness`` times an isotropic power-law field, standardised.

    The power-law part gives cloud edges the ragged, scale-invariant look of observed
    cloud fields (Cahalan and Snider 1989) instead of smooth contours.
    """
    base = _standardise(base)
    if roughness > 0:
        base = base + roughness * gaussian_random_field(shape, dx, dx, rng, outer_scale=outer_scale)
    return _standardise(base)


def _direction(value, rng, period):
    """A fixed direction [deg], or one drawn uniformly in ``[0, period)``."""
    return float(value) if value is not None else float(rng.uniform(0.0, period))


@dataclass(frozen=True)
class ClusteredField:
    """Clouds gathered in clusters, with clear gaps between the clusters.

    Cloud positions follow a Thomas cluster process (Thomas 1949): cluster centres are
    uniform at random, one per ``cluster_spacing**2`` on average (a Poisson number, at
    least one); each has a Poisson number of clouds, ``clouds_per_cluster`` on average,
    displaced from the centre by a Gaussian of standard deviation ``cluster_radius`` in x
    and y.  Each cloud is a Gaussian bump of standard deviation ``cloud_radius``; bumps
    add up, so close clouds merge.  Observed fields of fair-weather cumulus are clustered
    at scales of a few kilometres (Weger et al. 1992; Zhu et al. 1992, from memory), and
    organised shallow convection in the trades gathers in clusters tens of kilometres
    apart (Stevens et al. 2020, from memory; our default spacing is smaller, so that
    several clusters fit in a training domain).

    Attributes
    ----------
    cluster_spacing : float
        Mean distance between cluster centres [m]: one cluster per ``cluster_spacing**2``.
    cluster_radius : float
        Standard deviation of a cloud's position about its cluster centre [m].
    clouds_per_cluster : float
        Mean number of clouds per cluster [1].
    cloud_radius : float
        Standard deviation of each cloud's Gaussian bump [m].
    roughness : float
        Standard deviation [1] of the logarithm of a lognormal factor from an isotropic
        power-law field that multiplies the bumps, for ragged cloud edges; the gaps
        between clusters stay clear.

    References
    ----------
    Thomas, M. (1949), A generalization of Poisson's binomial limit for use in ecology,
    Biometrika 36, 18-25.
    Weger, R. C., J. Lee, T. Zhu and R. M. Welch (1992), Clustering, randomness and
    regularity in cloud fields: 1. Theoretical considerations, J. Geophys. Res. 97,
    20519-20536.
    Zhu, T., J. Lee, R. C. Weger and R. M. Welch (1992), Clustering, randomness and
    regularity in cloud fields: 2. Cumulus cloud fields, J. Geophys. Res. 97,
    20537-20558.
    Stevens, B. et al. (2020), Sugar, gravel, fish and flowers: Mesoscale cloud patterns
    in the trade winds, Q. J. R. Meteorol. Soc. 146, 141-152.

    Examples
    --------
    >>> from surrogate3d.scenes.random_fields import random_generator
    >>> out = ClusteredField().realise((64, 64), 100.0, random_generator(0))
    >>> out.field.shape, round(float(out.field.std()), 6), sorted(out.drawn)
    ((64, 64), 1.0, ['clouds', 'clusters'])
    """

    cluster_spacing: float = 5000.0
    cluster_radius: float = 800.0
    clouds_per_cluster: float = 20.0
    cloud_radius: float = 150.0
    roughness: float = 0.5
    kind: str = field(default="clustered", init=False)

    def validate(self, label="clustered structure"):
        """Raise ParameterError naming the first parameter outside its range; return self."""
        p = f"{label}: "
        check_number(p + "cluster_spacing", self.cluster_spacing, 0.0, 1e6, low_open=True)
        check_number(p + "cluster_radius", self.cluster_radius, 0.0, 1e6, low_open=True)
        check_number(p + "clouds_per_cluster", self.clouds_per_cluster, 1.0, 1000.0)
        check_number(p + "cloud_radius", self.cloud_radius, 0.0, 1e5, low_open=True)
        check_number(p + "roughness", self.roughness, 0.0, 10.0)
        return self

    def cloud_positions(self, shape, dx, rng):
        """Cloud positions of the Thomas cluster process on the periodic domain.

        Parameters
        ----------
        shape : tuple of int
            ``(ny, nx)``.
        dx : float
            Cell size [m].
        rng : numpy.random.Generator

        Returns
        -------
        positions : numpy.ndarray, shape (n, 2)
            (x, y) [m] of every cloud, in ``[0, nx dx) x [0, ny dx)``; at least one.
        clusters : int
            Number of clusters.
        """
        ny, nx = shape
        width, height = nx * dx, ny * dx
        clusters = max(1, int(rng.poisson(width * height / self.cluster_spacing ** 2)))
        centres = rng.uniform((0.0, 0.0), (width, height), size=(clusters, 2))
        members = rng.poisson(self.clouds_per_cluster, size=clusters)
        members[0] = max(members[0], 1)
        positions = (np.repeat(centres, members, axis=0)
                     + rng.normal(0.0, self.cluster_radius, size=(int(members.sum()), 2)))
        return positions % (width, height), clusters

    def realise(self, shape, dx, rng):
        """The cloud field on a periodic grid.

        Parameters
        ----------
        shape : tuple of int
            ``(ny, nx)``.
        dx : float
            Cell size [m].
        rng : numpy.random.Generator

        Returns
        -------
        StructureFields
            ``drawn`` holds the numbers of clusters and clouds.
        """
        ny, nx = shape
        positions, clusters = self.cloud_positions(shape, dx, rng)
        i = np.floor(positions[:, 0] / dx).astype(np.int64) % nx
        j = np.floor(positions[:, 1] / dx).astype(np.int64) % ny
        counts = np.bincount(j * nx + i, minlength=ny * nx).reshape(shape).astype(np.float64)
        kx, ky = _wavevectors(shape, dx)
        # Gaussian bumps by periodic convolution: the Fourier transform of a Gaussian of
        # standard deviation r is exp(-2 pi^2 r^2 k^2).
        bumps = _filter(counts, np.exp(-2.0 * np.pi ** 2 * self.cloud_radius ** 2 * (kx * kx + ky * ky)), shape)
        # Roughness multiplies the bumps, so that the gaps between clusters stay clear.
        noise = gaussian_random_field(shape, dx, dx, rng, outer_scale=4.0 * self.cloud_radius)
        values = _standardise(np.maximum(bumps, 0.0) * np.exp(self.roughness * noise))
        return StructureFields(values, drawn={"clusters": clusters, "clouds": len(positions)})


@dataclass(frozen=True)
class StreetField:
    """Cloud streets: bands of cloud along boundary-layer roll vortices.

    A Gaussian random field whose spectral density, in the frame of the streets, is
    ``exp(-k_a**2 / (2 s_a**2)) * [exp(-(k_c - k0)**2 / (2 s_c**2)) + (k_c -> -k_c)]``
    with ``k0 = 1 / roll_wavelength``, ``s_c = bandwidth * k0`` and
    ``s_a = 1 / (pi sqrt(2) street_length)``: by the Wiener-Khinchin theorem its
    autocorrelation along the streets is ``exp(-r**2 / street_length**2)`` and across
    them ``cos(2 pi r / roll_wavelength) exp(-2 pi**2 s_c**2 r**2)``.  On a small domain
    both spreads are at least half the grid's wavenumber spacing, so that some Fourier
    modes carry the streets.  Roll wavelengths are 2-4 times the boundary-layer depth
    (Kuettner 1971; LeMone 1973, from memory; Etling and Brown 1993 review aspect ratios
    up to about 10), and streets run for tens of kilometres, roughly along the mean wind
    (Kuettner 1971, from memory).

    Attributes
    ----------
    roll_wavelength : float
        Distance between neighbouring streets [m].
    street_length : float
        Along-street correlation length [m] (e-folding length of the Gaussian
        autocorrelation).
    bandwidth : float
        Relative spread of the across-street wavenumber [1]; small values give regular
        streets.
    direction : float or None
        Direction along which the streets run [deg], counterclockwise from +x, in
        [0, 180); ``None`` draws it from the seed.
    irregularity : float
        Weight [1], in [0, 1], of an isotropic power-law field mixed in (weights
        ``1 - irregularity`` and ``irregularity`` on unit-variance fields), which breaks
        the streets into cloud elements.

    References
    ----------
    Kuettner, J. P. (1971), Cloud bands in the earth's atmosphere: Observations and
    theory, Tellus 23, 404-426.
    LeMone, M. A. (1973), The structure and dynamics of horizontal roll vortices in the
    planetary boundary layer, J. Atmos. Sci. 30, 1077-1091.
    Etling, D. and R. A. Brown (1993), Roll vortices in the planetary boundary layer: A
    review, Boundary-Layer Meteorol. 65, 215-248.

    Examples
    --------
    >>> from surrogate3d.scenes.random_fields import random_generator
    >>> out = StreetField(direction=30.0).realise((64, 64), 100.0, random_generator(0))
    >>> out.drawn
    {'direction': 30.0}
    """

    roll_wavelength: float = 3000.0
    street_length: float = 10000.0
    bandwidth: float = 0.15
    direction: float | None = None
    irregularity: float = 0.3
    kind: str = field(default="streets", init=False)

    def validate(self, label="street structure"):
        """Raise ParameterError naming the first parameter outside its range; return self."""
        p = f"{label}: "
        check_number(p + "roll_wavelength", self.roll_wavelength, 0.0, 1e6, low_open=True)
        check_number(p + "street_length", self.street_length, 0.0, 1e7, low_open=True)
        check_number(p + "bandwidth", self.bandwidth, 0.0, 2.0, low_open=True)
        if self.direction is not None:
            check_number(p + "direction", self.direction, 0.0, 180.0, high_open=True)
        check_number(p + "irregularity", self.irregularity, 0.0, 1.0)
        return self

    def realise(self, shape, dx, rng):
        """The street field on a periodic grid (see :meth:`ClusteredField.realise`); ``drawn`` holds ``direction``."""
        ny, nx = shape
        direction = _direction(self.direction, rng, 180.0)
        angle = math.radians(direction)
        kx, ky = _wavevectors(shape, dx)
        along = kx * math.cos(angle) + ky * math.sin(angle)
        across = -kx * math.sin(angle) + ky * math.cos(angle)
        half_spacing = 0.5 / (max(nx, ny) * dx)
        k0 = 1.0 / self.roll_wavelength
        s_across = max(self.bandwidth * k0, half_spacing)
        s_along = max(1.0 / (math.pi * math.sqrt(2.0) * self.street_length), half_spacing)
        density = np.exp(-along ** 2 / (2.0 * s_along ** 2)) * (
            np.exp(-(across - k0) ** 2 / (2.0 * s_across ** 2)) + np.exp(-(across + k0) ** 2 / (2.0 * s_across ** 2)))
        density[0, 0] = 0.0
        streets = _standardise(_filter(rng.standard_normal(shape), np.sqrt(density), shape))
        if self.irregularity > 0:
            isotropic = gaussian_random_field(shape, dx, dx, rng, outer_scale=0.5 * self.roll_wavelength)
            streets = _standardise((1.0 - self.irregularity) * streets + self.irregularity * isotropic)
        return StructureFields(streets, drawn={"direction": direction})


#: Largest ``regularity`` of :class:`CellularField`: random sequential placement of
#: centres at least ``regularity * cell_diameter`` apart jams near this value for the
#: density of one centre per hexagon of width ``cell_diameter`` (disks cover about 0.55
#: of the plane at jamming: Feder 1980, from memory).
MAX_CELL_REGULARITY = 0.75


@dataclass(frozen=True)
class CellularField:
    """Open or closed mesoscale cells, as in marine stratocumulus.

    Cell centres are placed at random, one per hexagon of width ``cell_diameter`` on
    average, each at least ``regularity * cell_diameter`` from the others (random
    sequential placement, which stops after a bounded number of tries); every column
    belongs to the cell of its nearest centre (a Voronoi tessellation, periodic).  The
    distance ``e`` of a column from the wall between its nearest two centres, ``e =
    (d2**2 - d1**2) / (2 |c2 - c1|)``, gives the field: ``e`` for closed cells (cloudy
    cells separated by clear walls), ``-e`` for open cells (cloudy walls around clear
    cells) (Agee et al. 1973; Wood and Hartmann 2006).  Observed cells are 10-50 km wide,
    about 30 times the boundary-layer depth (Agee et al. 1973; Wood and Hartmann 2006,
    from memory); our default is smaller, so that several cells fit in a training domain.
    Distances use the nearest periodic image of each centre, so a domain should be at
    least two cells wide.

    Attributes
    ----------
    cell_type : str
        ``"closed"`` or ``"open"``.
    cell_diameter : float
        Mean distance between neighbouring cell centres [m].
    regularity : float
        Smallest distance between centres as a fraction of ``cell_diameter`` [1], in
        [0, 0.75]; 0 gives a Poisson-Voronoi tessellation, larger values more even cells.
    roughness : float
        Weight [1] of an isotropic power-law field added for ragged cloud edges.

    References
    ----------
    Agee, E. M., T. S. Chen and K. E. Dowell (1973), A review of mesoscale cellular
    convection, Bull. Amer. Meteor. Soc. 54, 1004-1012.
    Wood, R. and D. L. Hartmann (2006), Spatial variability of liquid water path in
    marine low cloud: The importance of mesoscale cellular convection, J. Climate 19,
    1748-1764.
    Feder, J. (1980), Random sequential adsorption, J. Theor. Biol. 87, 237-254.

    Examples
    --------
    >>> from surrogate3d.scenes.random_fields import random_generator
    >>> out = CellularField("open", cell_diameter=2000.0).realise((64, 64), 100.0, random_generator(0))
    >>> out.drawn["cells"] > 1
    True
    """

    cell_type: str = "closed"
    cell_diameter: float = 6000.0
    regularity: float = 0.6
    roughness: float = 0.2
    kind: str = field(default="cellular", init=False)

    def validate(self, label="cellular structure"):
        """Raise ParameterError naming the first parameter outside its range; return self."""
        p = f"{label}: "
        check_option(p + "cell_type", self.cell_type, ("closed", "open"))
        check_number(p + "cell_diameter", self.cell_diameter, 0.0, 1e6, low_open=True)
        check_number(p + "regularity", self.regularity, 0.0, MAX_CELL_REGULARITY)
        check_number(p + "roughness", self.roughness, 0.0, 10.0)
        return self

    def centres(self, shape, dx, rng):
        """Cell centres [m], shape (n, 2) as (x, y): at least two, kept apart by ``regularity``.

        On a domain less than four times ``regularity * cell_diameter`` wide, centres
        need only be a quarter of the domain apart.
        """
        ny, nx = shape
        width, height = nx * dx, ny * dx
        wanted = max(2, round(width * height / (0.5 * math.sqrt(3.0) * self.cell_diameter ** 2)))
        # On a domain narrower than a few cells, relax the spacing so that two centres fit.
        closest = min(self.regularity * self.cell_diameter, 0.25 * min(width, height))
        placed = []
        for _ in range(200 * wanted):
            candidate = rng.uniform((0.0, 0.0), (width, height))
            if placed:
                d = np.abs(np.asarray(placed) - candidate)
                d = np.minimum(d, (width, height) - d)
                if np.min(np.hypot(d[:, 0], d[:, 1])) < closest:
                    continue
            placed.append(candidate)
            if len(placed) == wanted:
                break
        return np.asarray(placed)

    def realise(self, shape, dx, rng):
        """The cell field on a periodic grid (see :meth:`ClusteredField.realise`); ``drawn`` holds ``cells``."""
        ny, nx = shape
        centres = self.centres(shape, dx, rng)
        nearest, second, v1, v2 = _nearest_two_centres(centres, shape, dx, 2.0 * self.cell_diameter)
        separation = np.hypot(*(v1 - v2))
        wall_distance = ((second - nearest) / (2.0 * np.maximum(separation, 1e-9 * dx))).reshape(shape)
        values = wall_distance if self.cell_type == "closed" else -wall_distance
        values = _rough(values, self.roughness, shape, dx, rng, outer_scale=0.25 * self.cell_diameter)
        return StructureFields(values, drawn={"cells": int(len(centres))})


def _wrap(offset, length):
    """Offsets [m] on a periodic axis of ``length``, mapped to ``[-length/2, length/2)``."""
    return (offset + 0.5 * length) % length - 0.5 * length


def _fold_centre(state, index, ux, uy):
    """Fold one centre, at displacement ``(ux, uy)`` from points ``index``, into their nearest two."""
    nearest, second, v1, v2 = state
    d2 = ux * ux + uy * uy
    n, s, a, b = nearest[index], second[index], v1[:, index], v2[:, index]
    first = d2 < n
    runner_up = ~first & (d2 < s)
    second[index] = np.where(first, n, np.where(runner_up, d2, s))
    v2[:, index] = np.where(first, a, np.where(runner_up, (ux, uy), b))
    nearest[index] = np.where(first, d2, n)
    v1[:, index] = np.where(first, (ux, uy), a)


def _nearest_two_centres(centres, shape, dx, reach):
    """Squared distances to, and displacements from, the nearest two centres of every column.

    Each centre is folded only into the columns within ``reach`` [m] of it in x and y (a
    window, on domains wider than it), which keeps the cost proportional to the domain
    area; columns whose second-nearest centre in the windows lies farther than the
    windows are sure to reach are folded with every centre.  Distances use each centre's
    nearest periodic image.

    Returns
    -------
    nearest, second : numpy.ndarray, shape (ny * nx,)
        Squared distances [m2] to the nearest and second-nearest centre.
    v1, v2 : numpy.ndarray, shape (2, ny * nx)
        Displacements (x, y) [m] from those centres to the columns.
    """
    ny, nx = shape
    width, height = nx * dx, ny * dx
    px, py = (np.arange(nx) + 0.5) * dx, (np.arange(ny) + 0.5) * dx
    cells = int(math.ceil(reach / dx))
    state = (np.full(ny * nx, np.inf), np.full(ny * nx, np.inf), np.zeros((2, ny * nx)), np.zeros((2, ny * nx)))

    def window(c, n):
        if 2 * cells + 1 >= n:
            return np.arange(n)
        return np.arange(int(c // dx) - cells, int(c // dx) + cells + 1) % n

    for cx, cy in centres:
        ii, jj = window(cx, nx), window(cy, ny)
        index = (jj[:, None] * nx + ii[None, :]).ravel()
        ux = np.broadcast_to(_wrap(px[ii] - cx, width)[None, :], (jj.size, ii.size)).ravel()
        uy = np.broadcast_to(_wrap(py[jj] - cy, height)[:, None], (jj.size, ii.size)).ravel()
        _fold_centre(state, index, ux, uy)
    if 2 * cells + 1 < max(nx, ny):
        unsure = np.flatnonzero(state[1] > ((cells - 1) * dx) ** 2)
        if unsure.size:
            state[0][unsure] = np.inf
            state[1][unsure] = np.inf
            jj, ii = np.divmod(unsure, nx)
            for cx, cy in centres:
                _fold_centre(state, unsure, _wrap(px[ii] - cx, width), _wrap(py[jj] - cy, height))
    return state


@dataclass(frozen=True)
class CascadeField:
    """A cloud deck whose liquid water follows a bounded multiplicative cascade.

    The water multiplier is :func:`surrogate3d.scenes.random_fields.bounded_cascade`
    (Cahalan et al. 1994), so the optical depth is far more intermittent than that of a
    Gaussian field: a few very thick cells and wide thin areas.  The cloud mask keeps the
    columns where the logarithm of the cascade is largest, so the holes open where the
    water is least.  The cascade splits blocks of the grid, so its sharpest jumps run
    along the x and y axes (a property of the published model); its origin is shifted
    by a random number of cells in x and y, so that they fall on different grid lines
    in every scene.

    Attributes
    ----------
    variability : float
        Fluctuation ``f_0`` of the largest-scale split [1], in (0, 1).  Cahalan et al.
        (1994) fitted their model to marine stratocumulus with values near 0.5 for the
        liquid water path (from memory).
    hurst : float
        Scaling exponent ``H`` [1], in (0, 1]; ``f_n = f_0 2**(-n H)``; 1/3 gives the
        observed ``k**(-5/3)`` spectrum of a 1D cascade (Marshak et al. 1994, from memory).

    References
    ----------
    Cahalan, R. F., W. Ridgway, W. J. Wiscombe, T. L. Bell and J. B. Snider (1994), The
    albedo of fractal stratocumulus clouds, J. Atmos. Sci. 51, 2434-2455.
    Marshak, A., A. Davis, R. Cahalan and W. Wiscombe (1994), Bounded cascade models as
    nonstationary multifractals, Phys. Rev. E 49, 55-69.

    Examples
    --------
    >>> from surrogate3d.scenes.random_fields import random_generator
    >>> out = CascadeField().realise((32, 32), 100.0, random_generator(0))
    >>> round(float(out.water_multiplier.mean()), 12)
    1.0
    """

    variability: float = 0.5
    hurst: float = 1.0 / 3.0
    kind: str = field(default="cascade", init=False)

    def validate(self, label="cascade structure"):
        """Raise ParameterError naming the first parameter outside its range; return self."""
        p = f"{label}: "
        check_number(p + "variability", self.variability, 0.0, 1.0, low_open=True, high_open=True)
        check_number(p + "hurst", self.hurst, 0.0, 1.0, low_open=True)
        return self

    def realise(self, shape, dx, rng):
        """The cascade and its standardised logarithm (see :meth:`ClusteredField.realise`)."""
        multiplier = bounded_cascade(shape, rng, self.variability, self.hurst)
        # A random origin, so that the largest steps of the cascade (at the edges of its
        # first blocks) do not always lie on the same grid lines.
        origin = (int(rng.integers(shape[0])), int(rng.integers(shape[1])))
        multiplier = np.roll(multiplier, origin, axis=(0, 1))
        return StructureFields(_standardise(np.log(multiplier)), water_multiplier=multiplier,
                               drawn={"origin": list(origin)})


#: Structure classes by their ``kind``.
STRUCTURES = {cls.kind: cls for cls in (ClusteredField, StreetField, CellularField, CascadeField)}


def structure_from_dict(table, current=None, label="structure"):
    """A structure from a table of parameters (as in a TOML configuration).

    Parameters
    ----------
    table : dict
        ``kind`` (one of :data:`STRUCTURES`) and any parameters of that structure.  Without
        ``kind``, or with the kind of ``current``, the parameters change ``current``.
    current : structure, optional
        The structure being changed.
    label : str
        Where the table comes from, for messages.

    Returns
    -------
    structure
        Validated.

    Raises
    ------
    surrogate3d.errors.ParameterError
        Unknown kind or parameter, or a value out of range.

    Examples
    --------
    >>> structure_from_dict({"kind": "streets", "roll_wavelength": 2500.0}).roll_wavelength
    2500.0
    """
    if not isinstance(table, dict):
        raise ParameterError(f"{label} must be a table of parameters; got {table!r}")
    params = dict(table)
    kind = params.pop("kind", None)
    if kind is None:
        if current is None:
            raise ParameterError(f"{label} needs a kind: one of {', '.join(STRUCTURES)}")
        kind = current.kind
    cls = STRUCTURES[check_option(f"{label} kind", kind, STRUCTURES)]
    allowed = [f.name for f in fields(cls) if f.init]
    unknown = sorted(set(params) - set(allowed))
    if unknown:
        raise ParameterError(f"{label} ({kind}) has unknown parameter {unknown[0]!r}; allowed: {', '.join(allowed)}")
    base = {f: getattr(current, f) for f in allowed} if current is not None and current.kind == kind else {}
    return cls(**{**base, **params}).validate(label)
