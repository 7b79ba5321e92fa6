"""Thermal (longwave) Monte Carlo kernels: a net-exchange estimator on the cell grid (numba).

Photons (energy bundles) start where the atmosphere, the surface or, when the top is lit,
space emits: the pair (source, spectral interval) is drawn in proportion to its emitted
power.  A photon flies cell by cell (periodic sides in 3D; confined to its column for
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
Veach and Guibas 1995), so each is unbiased together, ``|X| <= a``, and the tally is 0
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
from ._transport import _next_above, hg_cosine, lambertian_up, random_azimuth, rotate

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

PlanckTable = namedtuple("PlanckTable", ["t0", "inv_dt", "radiance", "layer_gas", "band_sum"])
PlanckTable.__doc__ = """Planck radiances tabulated in temperature (linear interpolation).

t0, inv_dt : float
    First temperature of the table [K] and the inverse of its step [K-1].
radiance : float64 (ninterval, nt)
    Band radiance of every interval [W m-2 sr-1].
layer_gas : float64 (nz, nt)
    Sum over intervals of gas absorption times radiance, per layer [W m-3 sr-1].
band_sum : float64 (nband, nt)
    Sum over every band's intervals of the radiance [W m-2 sr-1].
"""

Sources = namedtuple("Sources", ["cdf", "gas_cdf", "planck_cdf", "t_max", "band_lo", "band_hi"])
Sources.__doc__ = """Where photons start and in which interval.

cdf : float64 (nz ny nx + 2 ny nx,)
    Cumulative emitted power [W m-2 of one column] of the cells (C order), the surface
    columns, then the columns of the top (space).
gas_cdf : float64 (nz, ninterval)
    Per layer, cumulative gas absorption times radiance at the layer's warmest temperature:
    the proposal of the gas emission's interval, accepted with probability ``B(T) / B(T_max)``.
planck_cdf : float64 (nz + 2, ninterval)
    Cumulative radiance at the warmest temperature of every layer, of the surface and of
    the top: the proposal of the interval of cloud, surface and top emission.
t_max : float64 (nz + 2,)
    Those warmest temperatures [K].
band_lo, band_hi : int64 (nband,)
    The intervals ``band_lo[b] .. band_hi[b] - 1`` belong to band ``b``.
"""

ThermalRun = namedtuple("ThermalRun", ["full_3d", "seed", "batch_size", "roulette", "max_events"])
ThermalRun.__doc__ = """Settings of a run: 3D (else independent columns), random seed, photons per
batch, roulette weight relative to the starting weight, scattering events after which a
photon is absorbed where it is."""

Tallies = namedtuple("Tallies", ["cell", "col"])
Tallies.__doc__ = """One batch's tallies: ``cell`` (nz, ny, nx) net absorption, ``col`` (5, ny, nx)
in the order :data:`COLUMN_TALLIES`; W m-2 of one column's area."""


@njit(cache=True, inline="always", error_model="numpy")
def table_radiance(values, t0, inv_dt, temperature):
    """Radiance at ``temperature`` from one interval's row ``values`` of the table (linear)."""
    u = (temperature - t0) * inv_dt
    last = values.shape[0] - 2
    i = int(u) if u > 0.0 else 0
    if i > last:
        i = last
    f = u - i
    return values[i] + f * (values[i + 1] - values[i])


@njit(cache=True, inline="always", error_model="numpy")
def _search(cdf, lo, hi, u):
    # The first index of lo .. hi - 1 whose cumulative value exceeds u (hi - 1 if none).
    a, b = lo, hi - 1
    while a < b:
        m = (a + b) >> 1
        if cdf[m] > u:
            b = m
        else:
            a = m + 1
    return a


@njit(cache=True, inline="always", error_model="numpy")
def _interval(state, row, lo, hi, radiance, t0, inv_dt, temperature, t_max):
    """An interval of ``lo .. hi - 1`` drawn in proportion to the weights of the cumulative
    ``row`` (made at ``t_max``) times ``B(temperature) / B(t_max)``, by rejection; returns it
    and its radiance at ``temperature``.  The radiance rises with temperature, so the ratio
    is at most 1."""
    base = row[lo - 1] if lo > 0 else 0.0
    span = row[hi - 1] - base
    while True:
        n = _search(row, lo, hi, base + uniform(state) * span)
        b_here = table_radiance(radiance[n], t0, inv_dt, temperature)
        b_max = table_radiance(radiance[n], t0, inv_dt, t_max)
        if uniform(state) * b_max < b_here:
            return n, b_here


@njit(cache=True, inline="always", error_model="numpy")
def _cell_interval(state, medium, planck, sources, iz, iy, ix, temperature):
    """Interval (and radiance) of a photon emitted by cell (iz, iy, ix): gas or cloud
    emission in proportion to their power, then the interval."""
    t0, inv_dt = planck.t0, planck.inv_dt
    cloud = medium.cloud
    nb = cloud.shape[0]
    gas = table_radiance(planck.layer_gas[iz], t0, inv_dt, temperature)
    total = gas
    for b in range(nb):
        total += cloud[b, iz, iy, ix, 0] * table_radiance(planck.band_sum[b], t0, inv_dt, temperature)
    u = uniform(state) * total
    t_max = sources.t_max[iz]
    if u < gas:
        return _interval(state, sources.gas_cdf[iz], 0, medium.gas.shape[0], planck.radiance, t0, inv_dt,
                         temperature, t_max)
    u -= gas
    chosen = -1
    for b in range(nb):
        e = cloud[b, iz, iy, ix, 0] * table_radiance(planck.band_sum[b], t0, inv_dt, temperature)
        if e > 0.0:
            chosen = b
            if u < e:
                break
            u -= e
    if chosen < 0:  # only round-off can bring a cell without cloud emission here
        return _interval(state, sources.gas_cdf[iz], 0, medium.gas.shape[0], planck.radiance, t0, inv_dt,
                         temperature, t_max)
    return _interval(state, sources.planck_cdf[iz], sources.band_lo[chosen], sources.band_hi[chosen],
                     planck.radiance, t0, inv_dt, temperature, t_max)


@njit(cache=True, inline="always", error_model="numpy")
def _credit(tallies, kind, iz, iy, ix, x):
    # Add x to the net absorption of an emitter or absorber.
    if kind == CELL:
        tallies.cell[iz, iy, ix] += x
        tallies.col[ATMOSPHERE_NET, iy, ix] += x
    elif kind == SURFACE:
        tallies.col[SURFACE_NET, iy, ix] += x
    else:
        tallies.col[SPACE_NET, iy, ix] += x


@njit(cache=True, inline="always", error_model="numpy")
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
        tz = ((z_edge[iz + 1] if uz > 0.0 else z_edge[iz]) - z) / uz
        t, axis = tz, 2
        if full_3d:
            if ux != 0.0:
                tx = ((ix + 1) * dx - x if ux > 0.0 else ix * dx - x) / ux
                if tx < t:
                    t, axis = tx, 0
            if uy != 0.0:
                ty = ((iy + 1) * dy - y if uy > 0.0 else iy * dy - y) / uy
                if ty < t:
                    t, axis = ty, 1
        t = max(t, 0.0)
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
            if axis == 0:
                y += t * uy
                z += t * uz
                if ux > 0.0:
                    ix += 1
                    if ix == nx:
                        ix = 0
                    x = ix * dx
                else:
                    x = ix * dx
                    ix -= 1
                    if ix < 0:
                        ix = nx - 1
                        x = nx * dx
            elif axis == 1:
                x += t * ux
                z += t * uz
                if uy > 0.0:
                    iy += 1
                    if iy == ny:
                        iy = 0
                    y = iy * dy
                else:
                    y = iy * dy
                    iy -= 1
                    if iy < 0:
                        iy = ny - 1
                        y = ny * dy
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
    cumulative emitted power (stratified: unbiased, less noisy, and consecutive photons
    start in neighbouring cells).  Every photon carries the batch's total power over ``n``.
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
    nint = medium.gas.shape[0]
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
            n, b_emit = _cell_interval(state, medium, planck, sources, iz, iy, ix, temperature[iz, iy, ix])
            x = (ix + uniform(state)) * dx
            y = (iy + uniform(state)) * dy
            z = z_edge[iz] + uniform(state) * (z_edge[iz + 1] - z_edge[iz])
            uz = 2.0 * uniform(state) - 1.0
            cp, sp = random_azimuth(state)
            sint = math.sqrt(max(0.0, 1.0 - uz * uz))
            ux, uy = sint * cp, sint * sp
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
                row, temp = nz, boundaries.surface_temperature[iy, ix]
            else:
                # Isotropic radiance from above: the Lambertian distribution, downward.
                kind, iz, z, uz = SPACE, nz - 1, z_edge[nz], -uz
                row, temp = nz + 1, boundaries.top_temperature
            n, b_emit = _interval(state, sources.planck_cdf[row], 0, nint, planck.radiance, t0, inv_dt, temp,
                                  sources.t_max[row])
        events += trace(state, n, w, x, y, z, ux, uy, uz, ix, iy, iz, kind, iz, iy, ix, b_emit, threshold, run,
                        medium, boundaries, planck, tallies)
    return events


@njit(cache=True, inline="always")
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
