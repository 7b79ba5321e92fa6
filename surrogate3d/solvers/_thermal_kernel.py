"""Thermal (longwave) Monte Carlo kernels: a net-exchange estimator on the cell grid (numba).

Photons (energy bundles) start where the atmosphere, the surface or, when the top is lit,
space emits: the pair (source, spectral interval) is drawn in proportion to the power it
sends out (about, for cells: :func:`escape_power`), the point and direction of a cell's
emission towards where it escapes (:func:`_chord_emission`, :func:`_face_emission`), and
every photon carries the emitted over the sampling density.  A photon flies cell by cell (periodic sides in 3D; confined to its column for
independent columns).  Scattering distances are sampled (Henyey-Greenstein phase function,
Lambertian surface reflection); absorption is taken continuously: a flight of length ``s``
through a cell of absorption coefficient ``k_a`` deposits ``w (1 - exp(-k_a s))`` of the
weight ``w`` in it, the surface absorbs ``emissivity w`` of what reaches it, and what
reaches the top leaves.  Below a threshold weight an unbiased Russian roulette decides
whether the photon goes on.

Every deposit ``a`` that a photon emitted by ``i`` (Planck radiance ``B_i`` in its
interval) leaves in ``j`` (radiance ``B_j``; space radiates ``B`` of the top temperature,
or nothing) is tallied as the net exchange

    X = a (B_j - B_i) / (B_i + B_j),

added to the net absorption of ``i`` and subtracted from that of ``j``.  The paths from
``i`` to ``j`` and those from ``j`` to ``i`` both estimate the net exchange of the pair
``K_ij (B_j - B_i)`` (``K_ij = K_ji``, reciprocity); the factor ``1 / (B_i + B_j)`` weights
the two estimates in proportion to how often each is sampled (the balance heuristic of
Veach and Guibas 1995), so that together they are unbiased, ``|X| <= a``, and the tally is 0
wherever ``B_i = B_j``.  When ``j`` never emits (``B_j = 0``: cold space) ``X = -a``, the
plain loss.  Every run conserves energy to round-off: each ``X`` is added once and
subtracted once.  ``docs/methods/longwave.md`` explains the choice.

Column tallies of a batch, (5, ny, nx) in the order :data:`COLUMN_TALLIES`: the flux
reaching the surface and the flux leaving the top (forward estimates), the net
absorption of the surface, of space (net flux out through the top) and of the column's
cells.  Cell tallies: net absorption (nz, ny, nx).  All in W m-2 of one column's area.

Planck radiances come from a table in temperature per interval, interpolated linearly
(:func:`table_radiance`); emitted powers, the spectral sampling and the exchange tallies
all use the same interpolated function.
"""

import math
from collections import namedtuple

import numpy as np
from numba import njit, prange

from ._kernel import KERNEL
from ._rng import seed_stream, uniform, uniform_open
from ._transport import _next_above, cross_side, hg_cosine, lambertian_up, next_face, random_azimuth, rotate

ARRIVAL, LEAVING, SURFACE_NET, SPACE_NET, ATMOSPHERE_NET = range(5)
#: The column tallies of a batch, in order.
COLUMN_TALLIES = ("surface_arrival", "toa_leaving", "surface_net", "space_net", "atmosphere_net")
#: Kinds of emitters and absorbers.
CELL, SURFACE, SPACE = 0, 1, 2

Medium = namedtuple("Medium", ["gas", "cloud", "band_of", "temperature", "z_edge", "dx", "dy"])
Medium.__doc__ = """What the photons fly through.

gas : float64 (ninterval, nz)
    Gas absorption coefficient of every interval and layer [m-1].
cloud : float64 (nband, nz, ny, nx, 3)
    Cloud absorption and scattering coefficients [m-1] and asymmetry parameter [1].
band_of : int64 (ninterval,)
    Band of every interval (the first index of ``cloud``).
temperature : float64 (nz, ny, nx)
    Air temperature [K].
z_edge : float64 (nz + 1,)
    Layer edges [m], rising.
dx, dy : float
    Cell size [m].
"""

Boundaries = namedtuple("Boundaries", ["surface_temperature", "emissivity", "top_temperature"])
Boundaries.__doc__ = """The surface and the top.

surface_temperature, emissivity : float64 (ny, nx)
    [K] and [1]; the surface reflects ``1 - emissivity`` like a Lambertian surface.
top_temperature : float
    [K] of the black body that lights the top isotropically; 0 for none (cold space).
"""

PlanckTable = namedtuple("PlanckTable", ["t0", "inv_dt", "radiance"])
PlanckTable.__doc__ = """Planck radiances tabulated in temperature (linear interpolation).

t0, inv_dt : float
    First temperature of the table [K] and the inverse of its step [K-1].
radiance : float64 (ninterval, nt)
    Band radiance of every interval [W m-2 sr-1].
"""

Sources = namedtuple("Sources", ["cdf", "cell_cdf", "cloud_max", "chord", "planck_cdf", "t_max"])
Sources.__doc__ = """Where photons start and in which interval.

cdf : float64 (nz ny nx + 2 ny nx,)
    Cumulative sampling power [W m-2 of one column] of the cells (C order; their escaping
    emission as :func:`escape_power` approximates it), the surface columns (emission),
    then the columns of the top (what space sends in).
cell_cdf : float64 (nz, ninterval)
    Per layer, the cumulative :func:`escape_power` of every interval at the layer's warmest
    temperature and largest cloud absorption: the proposal of a cell photon's interval.
cloud_max : float64 (nband, nz)
    Largest cloud absorption coefficient of every band and layer [m-1].
chord : float64 (nz,)
    Mean chord length of a cell of every layer [m] (``4 V / S``; ``2 dz`` for the
    infinite slabs of independent columns).
planck_cdf : float64 (2, ninterval)
    Cumulative radiance at the warmest surface temperature and at the top temperature:
    the proposal of the interval of surface and top photons.
t_max : float64 (nz + 2,)
    The warmest temperature of every layer, of the surface, and the top's [K].
"""

ThermalRun = namedtuple("ThermalRun", ["full_3d", "seed", "batch_size", "roulette", "max_events"])
ThermalRun.__doc__ = """Settings of a run: 3D (else independent columns), random seed, photons per
batch, roulette weight relative to the starting weight, scattering events after which a
photon is absorbed where it is."""

Tallies = namedtuple("Tallies", ["cell", "col"])
Tallies.__doc__ = """One batch's tallies: ``cell`` (nz, ny, nx) net absorption, ``col`` (5, ny, nx)
in the order :data:`COLUMN_TALLIES`; W m-2 of one column's area."""


@njit(**KERNEL)
def table_radiance(values, t0, inv_dt, temperature):
    """Radiance at ``temperature`` from one interval's row ``values`` of the table (linear)."""
    u = (temperature - t0) * inv_dt
    last = values.shape[0] - 2
    i = int(u) if u > 0.0 else 0
    if i > last:
        i = last
    f = u - i
    return values[i] + f * (values[i + 1] - values[i])


@njit(**KERNEL)
def _search(cdf, u):
    # The first index whose cumulative value exceeds u (the last if none).
    a, b = 0, cdf.shape[0] - 1
    while a < b:
        m = (a + b) >> 1
        if cdf[m] > u:
            b = m
        else:
            a = m + 1
    return a


@njit(**KERNEL)
def _interval(state, row, radiance, t0, inv_dt, temperature, t_max):
    """An interval drawn in proportion to the weights of the cumulative ``row`` (made at
    ``t_max``) times ``B(temperature) / B(t_max)``, by rejection; returns it and its radiance
    at ``temperature``.  The radiance rises with temperature, so the ratio is at most 1."""
    while True:
        n = _search(row, uniform(state) * row[-1])
        b_here = table_radiance(radiance[n], t0, inv_dt, temperature)
        b_max = table_radiance(radiance[n], t0, inv_dt, t_max)
        if uniform(state) * b_max < b_here:
            return n, b_here


@njit(**KERNEL)
def escape_power(k_abs, chord):
    """``(1 - exp(-k_abs L)) / L``: the absorption coefficient ``k_abs`` [m-1] times the
    escape probability ``(1 - exp(-x)) / x`` of a path of the mean chord ``L`` [m]; per
    unit radiance and volume, and over 4 pi, the power a cell sends out of itself (about)."""
    x = k_abs * chord
    if x < 1e-12:
        return k_abs
    if x > 40.0:  # exp(-40) is below the rounding of 1
        return 1.0 / chord
    return -math.expm1(-x) / chord


@njit(**KERNEL)
def _cell_interval(state, medium, planck, sources, iz, iy, ix, temperature):
    """Interval of a photon of cell (iz, iy, ix), drawn in proportion to :func:`escape_power`
    times radiance: proposed from the layer's ``cell_cdf`` (warmest temperature, largest
    cloud absorption), accepted with the ratio of the cell's value to the proposal's, at
    most 1 because both factors rise with temperature and absorption.  Returns the
    interval, the cell's radiance and absorption coefficient in it."""
    t0, inv_dt = planck.t0, planck.inv_dt
    row = sources.cell_cdf[iz]
    chord = sources.chord[iz]
    t_max = sources.t_max[iz]
    while True:
        n = _search(row, uniform(state) * row[-1])
        band = medium.band_of[n]
        gas = medium.gas[n, iz]
        k_abs = gas + medium.cloud[band, iz, iy, ix, 0]
        b_here = table_radiance(planck.radiance[n], t0, inv_dt, temperature)
        proposal = table_radiance(planck.radiance[n], t0, inv_dt, t_max) \
            * escape_power(gas + sources.cloud_max[band, iz], chord)
        if uniform(state) * proposal < b_here * escape_power(k_abs, chord):
            return n, b_here, k_abs


@njit(**KERNEL)
def _selection_ratio(k_abs, chord):
    # Emitted over sampling power of a cell: k_abs / escape_power(k_abs, chord).
    x = k_abs * chord
    return x / -math.expm1(-x) if x >= 1e-12 else 1.0


@njit(**KERNEL)
def _depth_density(k_abs, depth, size):
    # Density of a depth drawn from k_abs exp(-k_abs d) truncated to [0, size].
    if k_abs * size < 1e-12:
        return 1.0 / size
    return k_abs * math.exp(-k_abs * depth) / -math.expm1(-k_abs * size)


@njit(**KERNEL)
def _face_emission(state, full_3d, ix, iy, z_lo, dx, dy, dz, k_abs, chord):
    """Start of a photon emitted by a scattering box cell (an infinite slab for independent
    columns), and its weight relative to the batch weight.

    A face in proportion to its area, a depth below it drawn from ``k_abs exp(-k_abs d)``
    truncated to the cell, uniform along the face, an isotropic direction.  The sampling
    density of the point is the mixture over all faces ``q(r) = sum_f k_abs exp(-k_abs d_f) /
    (S (1 - exp(-k_abs h_f)))`` (``d_f`` the distance to face f, ``h_f`` the cell's size across
    it, ``S`` its surface), and the weight ``r = 1 / (V q(r))`` relative to the power
    :func:`escape_power` the cell was drawn with.  ``q`` is at least its term of the nearest
    face, so ``r`` grows at most like ``exp(k_abs d)`` with the distance ``d`` to the
    nearest face, and every way out, scattered or not, is at least that long: no photon
    leaves the cell with more than a few times the batch weight.  Returns ``(x, y, z, ux, uy, uz, r)``.
    """
    if full_3d:
        area_x, area_y = dy * dz, dx * dz
    else:
        area_x = area_y = 0.0
    area_z = dx * dy
    half_surface = area_x + area_y + area_z
    x0, y0 = ix * dx, iy * dy
    x = x0 + uniform(state) * dx
    y = y0 + uniform(state) * dy
    z = z_lo + uniform(state) * dz
    pick = uniform(state) * half_surface
    far = uniform(state) < 0.5
    if pick < area_x:
        d = -math.log1p(uniform(state) * math.expm1(-k_abs * dx)) / k_abs if k_abs * dx >= 1e-12 \
            else uniform(state) * dx
        x = x0 + dx - d if far else x0 + d
    elif pick < area_x + area_y:
        d = -math.log1p(uniform(state) * math.expm1(-k_abs * dy)) / k_abs if k_abs * dy >= 1e-12 \
            else uniform(state) * dy
        y = y0 + dy - d if far else y0 + d
    else:
        d = -math.log1p(uniform(state) * math.expm1(-k_abs * dz)) / k_abs if k_abs * dz >= 1e-12 \
            else uniform(state) * dz
        z = z_lo + dz - d if far else z_lo + d
    x = min(max(x, x0), x0 + dx)
    y = min(max(y, y0), y0 + dy)
    z = min(max(z, z_lo), z_lo + dz)
    # q(r) S: a face f is drawn with probability A_f / S, then the point with density
    # (depth density) / A_f.
    depths = _depth_density(k_abs, z - z_lo, dz) + _depth_density(k_abs, z_lo + dz - z, dz)
    if full_3d:
        depths += _depth_density(k_abs, x - x0, dx) + _depth_density(k_abs, x0 + dx - x, dx)
        depths += _depth_density(k_abs, y - y0, dy) + _depth_density(k_abs, y0 + dy - y, dy)
    r = 2.0 * half_surface / (dx * dy * dz * depths)
    uz = 2.0 * uniform(state) - 1.0
    cp, sp = random_azimuth(state)
    sint = math.sqrt(max(0.0, 1.0 - uz * uz))
    return x, y, z, sint * cp, sint * sp, uz, r * _selection_ratio(k_abs, chord)


@njit(**KERNEL)
def _emission_direction(state, full_3d, isotropic, area_x, area_y, area_z):
    """A direction drawn from the mixture of the isotropic distribution (probability
    ``isotropic``) and the one proportional to the cell's projected area ``A(u) = |ux| area_x
    + |uy| area_y + |uz| area_z`` (face areas; ``area_z`` alone for independent columns): a
    face pair in proportion to its area, then a cosine-weighted direction about its normal
    with a random sign.  Returns ``(ux, uy, uz, A(u), ratio)``, ``ratio`` the isotropic
    density over the mixture's."""
    if not full_3d:
        area_x = area_y = 0.0
    half_surface = area_x + area_y + area_z
    if uniform(state) < isotropic:
        uz = 2.0 * uniform(state) - 1.0
        cp, sp = random_azimuth(state)
        sint = math.sqrt(max(0.0, 1.0 - uz * uz))
        ux, uy = sint * cp, sint * sp
    else:
        pick = uniform(state) * half_surface
        mu = math.sqrt(uniform(state))
        if uniform(state) < 0.5:
            mu = -mu
        cp, sp = random_azimuth(state)
        sint = math.sqrt(max(0.0, 1.0 - mu * mu))
        if pick < area_x:
            ux, uy, uz = mu, sint * cp, sint * sp
        elif pick < area_x + area_y:
            ux, uy, uz = sint * sp, mu, sint * cp
        else:
            ux, uy, uz = sint * cp, sint * sp, mu
    if uz == 0.0:
        uz = 1e-12
    area = abs(ux) * area_x + abs(uy) * area_y + abs(uz) * area_z
    return ux, uy, uz, area, 1.0 / (isotropic + (1.0 - isotropic) * 2.0 * area / half_surface)


@njit(**KERNEL)
def _chord_emission(state, full_3d, ix, iy, z_lo, dx, dy, dz, k_abs, chord):
    """Start of a photon emitted by a box cell (an infinite slab for independent columns)
    of absorption coefficient ``k_abs`` and mean chord ``chord``, and its weight relative to
    the batch weight, sampled so that the photons leaving the cell carry nearly equal
    weights however opaque it is.

    * A direction ``u`` from :func:`_emission_direction`, isotropic with probability
      ``1 / (1 + k_abs chord)``, else in proportion to the projected area ``A(u)`` (the
      directions in which an opaque cell's faces send radiation out).
    * The point where the line along ``u`` leaves the cell, uniform over ``A(u)``.
    * The start at distance ``s`` back along the line's chord ``l`` in the cell, drawn from
      ``k_abs exp(-k_abs s)`` truncated to ``[0, l]``: emission near the exit, which
      escapes, is drawn more often.

    The weight is the emitted density over the sampling density, relative to the power
    :func:`escape_power` the cell was drawn with,

        r = ratio(u) A(u) (1 - exp(-k_abs l)) exp(k_abs s) / k_abs / V * k_abs chord / (1 - exp(-k_abs chord)),

    ``ratio(u)`` the isotropic density over the sampled one.  A photon leaves the cell
    unscattered with a weight of about 1 however opaque the cell; but one scattered on the
    way may leave through a nearer face with its raised weight, so scattering cells use
    :func:`_face_emission`.  Returns ``(x, y, z, ux, uy, uz, r)``.
    """
    isotropic = 1.0 / (1.0 + k_abs * chord)
    ux, uy, uz, area, ratio = _emission_direction(state, full_3d, isotropic, dy * dz, dx * dz, dx * dy)
    x0, y0 = ix * dx, iy * dy
    if full_3d:
        # The exit point: on the face crossed (chosen by its share of A(u)), uniform on it.
        pick = uniform(state) * area
        px = x0 + uniform(state) * dx
        py = y0 + uniform(state) * dy
        pz = z_lo + uniform(state) * dz
        if pick < abs(ux) * dy * dz:
            px = x0 + dx if ux > 0.0 else x0
        elif pick < abs(ux) * dy * dz + abs(uy) * dx * dz:
            py = y0 + dy if uy > 0.0 else y0
        else:
            pz = z_lo + dz if uz > 0.0 else z_lo
        # The chord back from it to where the line enters the cell.
        length = ((pz - z_lo) if uz > 0.0 else (pz - z_lo - dz)) / uz
        if ux != 0.0:
            length = min(length, ((px - x0) if ux > 0.0 else (px - x0 - dx)) / ux)
        if uy != 0.0:
            length = min(length, ((py - y0) if uy > 0.0 else (py - y0 - dy)) / uy)
        length = max(length, 0.0)
    else:
        px, py = x0 + 0.5 * dx, y0 + 0.5 * dy
        pz = z_lo + dz if uz > 0.0 else z_lo
        length = dz / abs(uz)
    if k_abs * length < 1e-12:  # uniform along the chord
        s = uniform(state) * length
        along = length
    else:
        s = min(-math.log1p(uniform(state) * math.expm1(-k_abs * length)) / k_abs, length)
        along = -math.expm1(-k_abs * length) * math.exp(k_abs * s) / k_abs
    r = ratio * area * along / (dx * dy * dz) * _selection_ratio(k_abs, chord)
    z = min(max(pz - s * uz, z_lo), z_lo + dz)
    if full_3d:
        return px - s * ux, py - s * uy, z, ux, uy, uz, r
    return px, py, z, ux, uy, uz, r


@njit(**KERNEL)
def _credit(tallies, kind, iz, iy, ix, x):
    # Add x to the net absorption of an emitter or absorber.
    if kind == CELL:
        tallies.cell[iz, iy, ix] += x
        tallies.col[ATMOSPHERE_NET, iy, ix] += x
    elif kind == SURFACE:
        tallies.col[SURFACE_NET, iy, ix] += x
    else:
        tallies.col[SPACE_NET, iy, ix] += x


@njit(**KERNEL)
def _exchange(tallies, a, b_sink, kind, iz, iy, ix, b_emit, ekind, ez, ey, ex):
    """Tally the deposit ``a`` of a photon of emitter (ekind, ez, ey, ex), radiance ``b_emit``,
    in the absorber (kind, iz, iy, ix) of radiance ``b_sink``: net exchange weighted by the
    balance heuristic."""
    x = a * (b_sink - b_emit) / (b_sink + b_emit)
    if x != 0.0:
        _credit(tallies, ekind, ez, ey, ex, x)
        _credit(tallies, kind, iz, iy, ix, -x)


@njit(**KERNEL)
def trace(state, n, w, x, y, z, ux, uy, uz, ix, iy, iz, ekind, ez, ey, ex, b_emit, threshold, run, medium,
          boundaries, planck, tallies):
    """Trace one photon of interval ``n`` and weight ``w`` from (x, y, z) in cell (iz, iy, ix),
    direction (ux, uy, uz), emitted by (ekind, ez, ey, ex) of radiance ``b_emit``; returns
    its scattering events.

    In 3D the photon walks the cells with periodic sides, in independent-column mode only
    the layers of its column (``x``, ``y``, ``ux``, ``uy`` then do not matter).  Weights
    below ``threshold`` go on to Russian roulette.
    """
    gas = medium.gas[n]
    cloud = medium.cloud[medium.band_of[n]]
    radiance = planck.radiance[n]
    t0, inv_dt = planck.t0, planck.inv_dt
    temperature, z_edge, dx, dy = medium.temperature, medium.z_edge, medium.dx, medium.dy
    nz, ny, nx = temperature.shape
    full_3d = run.full_3d
    if uz == 0.0:
        uz = 1e-12  # a flight parallel to the layers would never cross a face
    tau = -math.log(uniform_open(state))
    events = 0
    while True:
        t, axis = next_face(x, y, z, ux, uy, uz, ix, iy, iz, dx, dy, z_edge, full_3d)
        props = cloud[iz, iy, ix]
        k_abs = gas[iz] + props[0]
        k_sca = props[1]
        scattered = k_sca * t > tau
        s = tau / k_sca if scattered else t
        if k_abs > 0.0:
            a = -w * math.expm1(-k_abs * s)
            b_cell = table_radiance(radiance, t0, inv_dt, temperature[iz, iy, ix])
            _exchange(tallies, a, b_cell, CELL, iz, iy, ix, b_emit, ekind, ez, ey, ex)
            w -= a
        if scattered:
            x += s * ux
            y += s * uy
            z += s * uz
            events += 1
            if events >= run.max_events:
                b_cell = table_radiance(radiance, t0, inv_dt, temperature[iz, iy, ix])
                _exchange(tallies, w, b_cell, CELL, iz, iy, ix, b_emit, ekind, ez, ey, ex)
                return events
            mu = hg_cosine(props[2], uniform(state))
            cp, sp = random_azimuth(state)
            ux, uy, uz = rotate(ux, uy, uz, mu, cp, sp)
            if uz == 0.0:
                uz = 1e-12
            tau = -math.log(uniform_open(state))
        else:
            tau -= k_sca * t
            if axis < 2:
                x, y, z, ix, iy = cross_side(axis, t, x, y, z, ux, uy, uz, ix, iy, nx, ny, dx, dy)
            else:
                x += t * ux
                y += t * uy
                if uz > 0.0:
                    iz += 1
                    if iz == nz:
                        tallies.col[LEAVING, iy, ix] += w
                        t_top = boundaries.top_temperature
                        b_top = table_radiance(radiance, t0, inv_dt, t_top) if t_top > 0.0 else 0.0
                        _exchange(tallies, w, b_top, SPACE, 0, iy, ix, b_emit, ekind, ez, ey, ex)
                        return events
                    z = z_edge[iz]
                else:
                    z = z_edge[iz]
                    iz -= 1
                    if iz < 0:
                        iz = 0
                        tallies.col[ARRIVAL, iy, ix] += w
                        a = boundaries.emissivity[iy, ix] * w
                        if a > 0.0:
                            b_sfc = table_radiance(radiance, t0, inv_dt, boundaries.surface_temperature[iy, ix])
                            _exchange(tallies, a, b_sfc, SURFACE, 0, iy, ix, b_emit, ekind, ez, ey, ex)
                            w -= a
                            if w <= 0.0:
                                return events
                        ux, uy, uz = lambertian_up(state)
                        tau = -math.log(uniform_open(state))
        if w < threshold:
            if uniform(state) * threshold < w:
                w = threshold
            else:
                return events


@njit(**KERNEL)
def _run_batch(state, batch, run, medium, boundaries, planck, sources, tallies):
    """Trace batch number ``batch`` into ``tallies``, drawing from the stream ``state``
    (seeded here from the run's seed and the batch number); returns the scattering events.

    Photon ``i`` of ``n`` draws its source from the ``i``-th of ``n`` equal slices of the
    cumulative sampling power (stratified: unbiased, less noisy, and consecutive photons
    start in neighbouring cells).  Every photon carries the batch's total sampling power
    over ``n``, times the ratio of emitted to sampling density of its start.
    """
    seed_stream(state, run.seed, batch)
    cdf = sources.cdf
    total = cdf[-1]
    if not total > 0.0:
        return 0
    temperature, z_edge, dx, dy = medium.temperature, medium.z_edge, medium.dx, medium.dy
    nz, ny, nx = temperature.shape
    ncol = ny * nx
    ncell = nz * ncol
    t0, inv_dt = planck.t0, planck.inv_dt
    count = run.batch_size
    w = total / count
    threshold = run.roulette * w
    last = cdf.shape[0] - 1
    k = 0
    events = 0
    for i in range(count):
        u = (i + uniform(state)) / count * total
        if k < last and cdf[k] <= u:
            k = _next_above(cdf, k, last, u)
        if k < ncell:
            kind = CELL
            iz = k // ncol
            iy = (k - iz * ncol) // nx
            ix = k - iz * ncol - iy * nx
            n, b_emit, k_abs = _cell_interval(state, medium, planck, sources, iz, iy, ix, temperature[iz, iy, ix])
            scatters = medium.cloud[medium.band_of[n], iz, iy, ix, 1] > 0.0
            dz = z_edge[iz + 1] - z_edge[iz]
            if scatters:
                x, y, z, ux, uy, uz, r = _face_emission(state, run.full_3d, ix, iy, z_edge[iz], dx, dy, dz, k_abs,
                                                        sources.chord[iz])
            else:
                x, y, z, ux, uy, uz, r = _chord_emission(state, run.full_3d, ix, iy, z_edge[iz], dx, dy, dz, k_abs,
                                                         sources.chord[iz])
        else:
            surface = k < ncell + ncol
            c = k - ncell if surface else k - ncell - ncol
            iy = c // nx
            ix = c - iy * nx
            x = (ix + uniform(state)) * dx
            y = (iy + uniform(state)) * dy
            ux, uy, uz = lambertian_up(state)
            if surface:
                kind, iz, z = SURFACE, 0, z_edge[0]
                row, temp = 0, boundaries.surface_temperature[iy, ix]
            else:
                # Isotropic radiance from above: the Lambertian distribution, downward.
                kind, iz, z, uz = SPACE, nz - 1, z_edge[nz], -uz
                row, temp = 1, boundaries.top_temperature
            n, b_emit = _interval(state, sources.planck_cdf[row], planck.radiance, t0, inv_dt, temp,
                                  sources.t_max[nz + row])
            r = 1.0
        events += trace(state, n, w * r, x, y, z, ux, uy, uz, ix, iy, iz, kind, iz, iy, ix, b_emit, threshold, run,
                        medium, boundaries, planck, tallies)
    return events


@njit(cache=True)
def cell_sampling_power(gas, cloud, band_of, temperature, z_edge, chord, t0, inv_dt, radiance):
    """The power every cell is drawn with [W m-2 of one column]: ``4 pi dz sum_n B_n(T)
    escape_power(k_n, chord)`` over the intervals ``n`` (:func:`escape_power`, :func:`table_radiance`),
    (nz, ny, nx)."""
    nz, ny, nx = temperature.shape
    nint = gas.shape[0]
    power = np.zeros((nz, ny, nx))
    for k in range(nz):
        scale = 4.0 * math.pi * (z_edge[k + 1] - z_edge[k])
        for j in range(ny):
            for i in range(nx):
                t = temperature[k, j, i]
                total = 0.0
                for n in range(nint):
                    k_abs = gas[n, k] + cloud[band_of[n], k, j, i, 0]
                    if k_abs > 0.0:
                        total += table_radiance(radiance[n], t0, inv_dt, t) * escape_power(k_abs, chord[k])
                power[k, j, i] = scale * total
    return power


@njit(**KERNEL)
def _add_deviation(sums, sumsq, pivot, first, m, v):
    # Sums of a batch value's deviation from the first batch's, and of its square: the
    # variance from them does not lose the digits that sums of raw squares would.
    if first:
        pivot[m] = v
    d = v - pivot[m]
    sums[m] += d
    sumsq[m] += d * d


@njit(cache=True, parallel=True)
def run_batches(first_batch, n_batches, wave, run, medium, boundaries, planck, sources, cell_spread, col_values):
    """Run batches ``first_batch .. first_batch + n_batches - 1``; returns the scattering events.

    Batches run in waves of ``wave``, in parallel within a wave, each into its own tallies;
    the tallies are then taken in batch order, so the results do not depend on the number
    of threads.  ``cell_spread`` (3, nz ny nx) receives, per cell, the sums of the batch
    values' deviations from batch 0's, of their squares, and batch 0's values;
    ``col_values`` (nbatch, 5, ny, nx) every batch's column tallies.
    """
    nz, ny, nx = medium.temperature.shape
    ncell = nz * ny * nx
    cells = np.empty((wave, nz, ny, nx))
    cols = np.empty((wave, 5, ny, nx))
    slot_events = np.zeros(wave, dtype=np.int64)
    # 128 bytes for each 32-byte stream state: a state, written at every draw, then never
    # shares a cache line with another thread's.
    states = np.zeros((wave, 16), dtype=np.uint64)
    sums, sumsq, pivot = cell_spread[0], cell_spread[1], cell_spread[2]
    total_events = 0
    for start in range(first_batch, first_batch + n_batches, wave):
        m = min(wave, first_batch + n_batches - start)
        for i in prange(m):
            cells[i] = 0.0
            cols[i] = 0.0
            slot_events[i] = _run_batch(states[i], start + i, run, medium, boundaries, planck, sources,
                                        Tallies(cells[i], cols[i]))
        for i in range(m):
            flat = cells[i].reshape(ncell)
            first = start + i == 0
            for c in range(ncell):
                _add_deviation(sums, sumsq, pivot, first, c, flat[c])
            col_values[start + i] = cols[i]
            total_events += slot_events[i]
    return total_events
