"""Defaults and numerical tunables, in one place (standard library only).

*Defaults* are what a function or command uses when the user gives nothing; the commands
show them in their help.  *Tunables* set how the numerics run: block sizes change only the
cost, tolerances and the Monte Carlo step and roulette settings change round-off or noise,
never the expected values.  A tunable of the Monte Carlo kernel changes its random
numbers: results stay identical for a seed only as long as these stay the same.

Examples
--------
>>> SOLAR_CONSTANT, SIMULATE_PHOTONS
(1361.0, 200000)
"""

#: Total solar irradiance at 1 au [W m-2] (Kopp and Lean 2011, Geophys. Res. Lett. 38, L01706).
SOLAR_CONSTANT = 1361.0

# --- Monte Carlo ---------------------------------------------------------------------

#: Photons of one :func:`~surrogate3d.solvers.solve_monte_carlo` call.
MONTE_CARLO_PHOTONS = 1_000_000
#: Photons of every Monte Carlo run of ``surrogate3d simulate``.
SIMULATE_PHOTONS = 200_000
#: Default rays per cell column of the backward estimate of the longwave boundary fluxes of
#: ``surrogate3d simulate``: on 200 x 200 columns of 100 m, 16 rays bring the 1 km block
#: noise of the surface downward flux from 16 to 1.9 W m-2 and that of the top upward flux
#: from 40 to 0.49 W m-2 for 4.4 s of CPU per 3D run (benchmarks/bench_thermal_backward.py);
#: 32 rays take about 1 / sqrt(2) of that noise for twice the CPU.
LONGWAVE_BOUNDARY_RAYS = 32
#: Batches the default batch size aims at (for the standard errors), and its bounds.
BATCHES = 32
MIN_BATCH_SIZE = 1_000
MAX_BATCH_SIZE = 50_000
#: Batches per parallel wave; fixed so results do not depend on the thread count.
MONTE_CARLO_WAVE = 8
#: Photons between two progress reports (rounded to whole waves).
PROGRESS_PHOTONS = 200_000
#: Cells per side of the majorant blocks of delta tracking, and the largest radius
#: (blocks) of the clear-air cubes a photon crosses in one step.
MAJORANT_BLOCK = 1
CLEAR_CUBE = 8
#: Layers per block of the per-ray source tables of the direct beam.
RAY_TABLE_LAYERS = 4
#: Columns per side of the tiles of the direct beam's ray families: the rays of the
#: columns of a tile land at independent random points, and the tile repeats.  16 keeps
#: host columns up to 16 cells wide as noisy as with independent rays per column; with
#: tiles of 4, the 1 000 columns sharing each family made the pooled per-column z-scores
#: of two seeds swing (rms 0.92 to 1.22 on the shared scene, 1.03 and 0.99 with 16).
DIRECT_BEAM_TILE = 16
#: Optical thickness across a cell below which a cell counts as clear air for cube steps.
CLEAR_CELL_OPTICAL_THICKNESS = 0.01
#: Photon weight, relative to the starting weight, below which Russian roulette decides
#: survival (``docs/methods/monte-carlo.md``), and the cap on scattering events per photon.
ROULETTE_WEIGHT = 0.3
MAX_SCATTERING_EVENTS = 100_000

# --- learned models and their training envelope --------------------------------------

#: Relative cut-off below which singular values count as zero when ridge ``alpha`` is 0.
SINGULAR_CUTOFF = 1e-12
#: A feature whose training standard deviation is at most this fraction of the magnitude
#: of its mean is constant up to round-off.  The round-off of a mean over 10^4 to 10^5
#: float64 values summed in order is below 1e-11 of it; any variation that matters
#: physically is far above 1e-9 of the value.
NEAR_CONSTANT = 1e-9
#: Largest magnitude of a clear-sky gate feature that still counts as zero.  The gate
#: features of the recipes (cloud fraction, neighbourhood cloud fraction, slant minus
#: vertical optical depth) are exactly 0 in clear sky up to round-off, about 1e-16 of
#: the clear-sky optical depth; 1e-9 is far above that and far below any cloud that
#: matters radiatively.
CLEAR_SKY_TOLERANCE = 1e-9
#: Principal components whose own variance the envelope distance keeps (at most the
#: feature count).  Six keep a ridge coefficient file of the default recipe (32 features)
#: within 20 kB.
ENVELOPE_COMPONENTS = 6
#: Quantile of the training columns' distances beyond which a column is flagged.
ENVELOPE_QUANTILE = 0.99
#: Smallest variance (of standardized features) any envelope direction is given, so that
#: directions without training variance flag departures instead of dividing by zero.
ENVELOPE_VARIANCE_FLOOR = 1e-6

# --- block sizes (cost only) ------------------------------------------------------------

#: Columns per block of the ridge evaluation and the envelope checks: the block's arrays
#: then stay in cache (twice as fast).
ROW_BLOCK = 1024
#: (node, column) pairs per block of the tree evaluation: large enough to amortize the
#: per-block work, small enough for the working arrays to stay in cache.
TREE_BLOCK_ELEMENTS = 1 << 19
#: Cells per block of rows of the feature stencils and slant-path sums (a few float64
#: planes of this size fit in cache).
CELL_BLOCK = 1 << 14
#: Columns solved together by the two-stream solver: large enough to amortize numpy call
#: overhead, small enough that the per-layer temporaries stay in cache (measured with
#: benchmarks/bench_two_stream.py).
TWO_STREAM_BLOCK_COLUMNS = 4096
