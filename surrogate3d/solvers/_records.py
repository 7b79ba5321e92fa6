"""The named records the Monte Carlo kernels take (numba accepts named tuples as arguments).

A record groups what one part of the physics reads, so a kernel's signature says what it
uses and a field is read by name, never by position.  Arrays of the mode a run does not
trace (3D or independent columns) are small placeholders of the right type, so both modes
compile to one set of kernels.  Shapes use ``nband`` bands, ``nz`` layers (layer 0 at the
bottom) and ``ny x nx`` columns; fluxes are fractions of one column's incident flux.

Built by :mod:`surrogate3d.solvers.montecarlo` for a whole run: :class:`Optics` (what
the photons interact with), :class:`Grid` (the cells and the majorant blocks the 3D walk
is tracked on), :class:`Beam` (the direct solar beam and where its per-ray tables are
kept), :class:`Slabs` (the uniform layers the beam crosses in one step), :class:`Run`
(the settings) and :class:`RunSums` (the sums over batches).  Built
by the kernels per batch or per photon: :class:`Tallies` (where a batch adds what it
measures), :class:`Survival` (when a photon stops), :class:`BeamTables` (one batch's
direct beam), :class:`Photon` (where and how a photon starts).

Numba hands every field of a record to a compiled function as one more machine
argument.  The calls made once per photon therefore take only what they read: the
photon's start is found from plain arrays (:func:`surrogate3d.solvers._geometry.locate_source_3d`),
and an independent-column photon is traced with three arrays; given the whole records,
those calls made the 3D solver 10 % slower.  A renamed record also leaves numba's cache
index unreadable (``AttributeError`` on import): delete ``surrogate3d/solvers/__pycache__``.
"""

from collections import namedtuple

Optics = namedtuple("Optics", ["kext", "ssa_g", "column_props", "albedo", "band_weight"])
Optics.__doc__ = """Optical properties, traced in single precision.

kext : float32 (nband, nz, ny, nx)
    Extinction coefficient [m-1] (3D mode).
ssa_g : float32 (nband, nz, ny, nx, 2)
    Single-scattering albedo and asymmetry parameter [1] (3D mode); with ``kext``, views of
    one (..., 3) array, so a collision finds them in the cache line the walk has read.
column_props : float32 (nband, ny, nx, nz, 3)
    Extinction [m-1], single-scattering albedo and asymmetry [1] with each column's
    layers contiguous (independent-column mode).
albedo : float64 (nband, ny, nx)
    Lambertian surface albedo [1].
band_weight : float64 (nband,)
    Solar weight of every band [1] (they sum to 1).
"""

Grid = namedtuple("Grid", ["z_edge", "dx", "dy", "bx", "by", "bedge", "zb", "kmaj", "bcode", "kclear",
                           "clear_below", "clear_above"])
Grid.__doc__ = """The cell grid (periodic in x and y) and the majorant blocks of 3D delta tracking.

z_edge : float64 (nz + 1,)
    Layer edges [m], rising.
dx, dy : float
    Cell size [m].
bx, by : int
    Columns per majorant block along x and y.
bedge : int64 (nbz + 1,)
    Layer index of every block row's bottom edge, then ``nz``.
zb : float64 (nbz + 1,)
    Height of those edges [m].
kmaj : float32 (nband, nbz, nby, nbx)
    Largest extinction in every block [m-1] (``kext`` itself for blocks of one cell).
bcode : uint8 (nband, nbz, nby, (nbx + 1) // 2)
    Four-bit block codes, two per byte: 0 tracked at the block's majorant, 1 at the
    clear-air rate, ``r + 1`` the centre of a cube of clear blocks of radius ``r``.
kclear : float64 (nband,)
    Largest extinction of the clear-air cells [m-1].
clear_below, clear_above : int64 (nband,)
    Block rows below ``clear_below`` and from ``clear_above`` up are clear in every column.
"""

Beam = namedtuple("Beam", ["ux", "uy", "uz", "nsub", "tile_x", "tile_y", "max_segments", "sweep_ext",
                           "absorbing_start", "absorbing_cell", "absorbing_optics", "reach_x", "reach_y", "edge_slot",
                           "kept", "table_edges",
                           "column_cdf", "column_direct"])
Beam.__doc__ = """The direct solar beam.

ux, uy, uz : float
    Its direction of travel (``uz < 0``).
nsub : int
    Rays per column and horizontal axis that every batch traces (3D mode).
tile_x, tile_y : int
    Columns along x and y of the tiles of the direct beam's ray families: the rays of
    columns at the same place of their tiles land at the same points of their columns
    (3D mode; :func:`surrogate3d.solvers._geometry.direct_beam_batch`).
max_segments : int
    Most segments a direct-beam ray can have (:func:`surrogate3d.solvers._geometry.max_segments`).
sweep_ext : float32 (nband, nwalk, tile_y, tile_x, ny / tile_y, nx / tile_x)
    Extinction [m-1] of the conservative cells of the layers the direct beam walks
    (between the uniform slabs), grouped by place in the tiles, 0 in absorbing cells;
    3D mode.
absorbing_start : int64 (nband nwalk tile_y tile_x + 1,)
    Where the absorbing cells of every (band, layer, place in the tiles) start in the
    next two arrays.
absorbing_cell : int32 (n, 2)
    Their ``(iy // tile_y, ix // tile_x)``.
absorbing_optics : float64 (n, 2)
    Their extinction [m-1] and single-scattering albedo
    (:func:`surrogate3d.solvers._geometry.sweep_tables`).
reach_x, reach_y : float
    Horizontal travel [m] of the beam from the top of the domain to the surface (a record
    field may not be a tuple: a parallel loop cannot take nested tuples).
edge_slot : int64 (nz + 1,)
    Slot of the per-ray tables at every layer edge (-1 where none is kept).
kept : int64 (ncz + 1, 2)
    The kept layer edges as ``(slot, edge index)``.
table_edges : int64 (ncz + 1,)
    Layer-edge indices where the per-ray tables are kept, rising.
column_cdf : float64 (nband * ny * nx,)
    Independent columns: the cumulative solar-weighted source of the exact column beams,
    shared by every batch (3D mode: unused).
column_direct : float64 (3, nband, ny, nx)
    Independent columns: solar-weighted direct flux reaching the surface, absorbed in the
    column and absorbed by the surface (3D mode: unused).
"""

Slabs = namedtuple("Slabs", ["top", "bottom", "top_transmission", "top_source", "bottom_transmission",
                             "top_absorption"])
Slabs.__doc__ = """The horizontally uniform layers the direct beam crosses without walking their cells
(:func:`surrogate3d.solvers._geometry.uniform_slabs`).

top, bottom : int
    Every layer from ``top`` up is uniform in every band, every layer below ``bottom <=
    top`` uniform and conservative.
top_transmission, top_source : float64 (nband, nz + 1)
    Per unit incident beam: the transmission from the domain top down to edge
    ``k >= top``, and the energy scattered above it.
bottom_transmission : float64 (nband, nz + 1)
    The transmission from edge ``bottom`` down to edge ``k <= bottom``.
top_absorption : float64 (nband, nz)
    The absorption of layer ``k >= top``.
"""

Run = namedtuple("Run", ["full_3d", "seed", "batch_size", "roulette", "max_events"])
Run.__doc__ = """Settings of a run.

full_3d : bool
    3D transport (else independent columns).
seed : int
    Random seed; batch ``i`` draws from stream ``i`` of it.
batch_size : int
    Photons per batch.
roulette : float
    Weight, relative to a photon's starting weight, below which Russian roulette decides survival.
max_events : int
    Scattering events after which a photon is absorbed where it is.
"""

Tallies = namedtuple("Tallies", ["col", "cell", "scale"])
Tallies.__doc__ = """Where a batch adds what it measures.

col : float64 (nband, 5 ny nx)
    Column tallies of the batch (:func:`surrogate3d.solvers._transport.slot_index`).
cell : int64 (nz, ny, nx)
    Solar-weighted absorption per cell in fixed point, added to by several batches.
scale : float
    Fixed-point units per unit of flux.
"""

Survival = namedtuple("Survival", ["threshold", "max_events"])
Survival.__doc__ = """When a photon stops (one batch).

threshold : float
    Weight below which Russian roulette decides survival instead of a weight reduction.
max_events : int
    Scattering events after which a photon is absorbed where it is.
"""

BeamTables = namedtuple("BeamTables", ["ray_xy", "source", "ray_cum", "ray_trans", "cdf", "direct", "landing",
                                       "seg_cells", "seg_lengths", "sweep"])
BeamTables.__doc__ = """One batch's direct beam (3D mode; scratch of the thread that runs the batch).

ray_xy : float64 (nray, 2)
    Entry point of every ray at the top of the domain [m].
source : float64 (nband, nray)
    Scattered plus surface-reflected energy of every ray.
ray_cum, ray_trans : float64 (nband, nray, ncz + 1)
    Scattered energy above, and beam left at, the kept layer edges from the top down.
cdf : float64 (nband * nray,)
    Cumulative solar-weighted source over (band, ray).
direct : float64 (3, nband, ny, nx)
    Solar-weighted direct flux reaching the surface, absorbed in the column and absorbed by
    the surface.
landing : float64 (nfamily, 2)
    Where the rays of every family land in their columns, (x, y) as fractions of the
    column's sides (:func:`surrogate3d.solvers._geometry.direct_beam_batch`).
seg_cells : int32 (max_segments, 4)
    The segments of the family being swept: layer, column offsets along y and x, table
    slot of the edge it ends on (:func:`surrogate3d.solvers._geometry.trace_segments`).
seg_lengths : float64 (max_segments,)
    Their lengths [m].
sweep : float64 (3, ny nx)
    Scratch of the sweep: per ray of a family, the optical depth of conservative cells not
    yet applied, the beam left and the source so far.
"""

Photon = namedtuple("Photon", ["band", "weight", "x", "y", "z", "ux", "uy", "uz", "ix", "iy", "iz"])
Photon.__doc__ = """Where and how a photon starts.

band : int
weight : float
    In units of one column's incident flux.
x, y, z : float
    Position [m] inside the domain (``z`` only, for independent columns).
ux, uy, uz : float
    Direction of travel.
ix, iy, iz : int
    The cell holding the position.
"""

RunSums = namedtuple("RunSums", ["col_sum", "spread", "cell_fixed", "scale"])
RunSums.__doc__ = """A run's sums over its batches (:func:`surrogate3d.solvers._transport.run_batches`).

col_sum : float64 (nband, ny, nx, 6)
    Sums of the batch tallies, in the order of :data:`surrogate3d.solvers._transport.SUM_NAMES`.
spread : float64 (3, ny nx + 1, 6)
    For the band-summed batch tallies of every column and (last row) their domain means:
    sums of their deviations from batch 0's values, of the squared deviations, and batch 0's values.
cell_fixed : int64 (nthread, nz, ny, nx)
    Absorption per cell of each thread's batches, in fixed point.
scale : float
    Fixed-point units per unit of flux.
"""
