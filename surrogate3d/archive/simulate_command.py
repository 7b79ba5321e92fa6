"""``surrogate3d simulate``: fill an archive with 3D, independent-column and two-stream results,
shortwave, longwave or both."""

from ..core.config import LONGWAVE_BOUNDARY_RAYS, SIMULATE_PHOTONS, SOLAR_CONSTANT
from ..core.data_model import SOLVERS, SPECTRA

#: Parameters of simulate_archive as the options that set them, for messages.
FLAGS = {"photons": "--photons", "seed": "--seed", "n_jobs": "--jobs", "batch_size": "--batch-size",
         "batches": "--batches", "rays_per_column": "--rays-per-column", "threads": "--threads",
         "solar_constant": "--solar-constant",
         "solar_zenith_angle": "--zenith", "solar_beam_azimuth": "--azimuth", "scheduler": "--scheduler",
         "solvers": "--solvers", "spectrum": "--spectrum", "longwave_resolution": "--longwave-resolution",
         "longwave_boundary_rays": "--longwave-boundary-rays", "zenith_jitter": "--zenith-jitter"}


def register(sub):
    p = sub.add_parser(
        "simulate", help="run the 3D, independent-column and two-stream solvers on every scene of an archive",
        description="Runs every scene x sun geometry x solver kind and writes the results into the scene "
                    "files. Finished results are kept: a run that is stopped continues where it stopped. "
                    "Runs started on one archive at the same time share the work.")
    p.add_argument("archive_dir", help="archive directory of scene files (*.nc)")
    p.add_argument("--spectrum", choices=SPECTRA, default="shortwave",
                   help="shortwave results (one per solver and sun geometry), longwave results (one per "
                        "solver and scene, no sun; needs scenes with temperatures) or both (default: shortwave)")
    p.add_argument("--zenith", type=float, nargs="+", default=[30.0], metavar="DEG",
                   help="solar zenith angles in degrees, 0 <= zenith < 90 (default: 30; shortwave only)")
    p.add_argument("--azimuth", type=float, nargs="+", default=[0.0], metavar="DEG",
                   help="directions of travel of the direct beam in degrees, counterclockwise from +x, "
                        "0 <= azimuth < 360 (default: 0)")
    p.add_argument("--zenith-jitter", type=float, default=0.0, metavar="DEG",
                   help="every scene's sun near each --zenith at its own angle within DEG of it (0-45), drawn "
                        "from the run seed and the scene's file name, so that a scene set covers the angles "
                        "between the given ones (default: 0, the given angles)")
    p.add_argument("--random-azimuth", action="store_true",
                   help="instead of --azimuth, one beam azimuth per scene and zenith, drawn from the run seed "
                        "and the scene's file name")
    p.add_argument("--photons", type=int, default=SIMULATE_PHOTONS,
                   help=f"photons per Monte Carlo run, shortwave and longwave (default: {SIMULATE_PHOTONS})")
    p.add_argument("--longwave-resolution", type=float, metavar="CM-1",
                   help="widest spectral interval of the longwave gas absorption in cm-1 (default: 10, "
                        "299 intervals)")
    p.add_argument("--longwave-boundary-rays", type=int, default=LONGWAVE_BOUNDARY_RAYS, metavar="N",
                   help="rays per cell column of a backward Monte Carlo estimate of the longwave surface fields and "
                        "top upward flux, far less noisy per column than the forward tallies at the same cost "
                        f"(default: {LONGWAVE_BOUNDARY_RAYS}; 0: the forward tallies)")
    p.add_argument("--seed", type=int, default=0, help="run seed (default: 0)")
    p.add_argument("--solvers", nargs="+", choices=SOLVERS, default=list(SOLVERS), help="solver kinds to run")
    p.add_argument("--jobs", type=int, default=1, help="local worker processes (default: 1)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run on a Dask distributed scheduler at ADDRESS")
    batching = p.add_mutually_exclusive_group()
    batching.add_argument("--batch-size", type=int, help="photons per batch (default: automatic, 32 batches or more "
                          "of 1000 to 50000 photons)")
    batching.add_argument("--batches", type=int,
                          help="batches per run instead: standard errors from N batches are precise to about "
                               "1/sqrt(2(N-1)), 5 %% for 200, at 6-9 CPU ms per extra batch per 16 000 columns")
    p.add_argument("--rays-per-column", type=int, default=1,
                   help="direct-beam strata per column side in every photon batch, two mirrored rays in each (default: 1)")
    p.add_argument("--threads", type=int,
                   help="compiled threads per run (default: all cores; 1 per worker with --jobs or --scheduler)")
    p.add_argument("--per-band", action="store_true", help="also store per-band column fluxes")
    p.add_argument("--solar-constant", type=float, default=SOLAR_CONSTANT,
                   help=f"W m-2 (default: {SOLAR_CONSTANT:g}, Kopp and Lean 2011)")
    p.add_argument("--overwrite", action="store_true",
                   help="recompute results that are already stored (needs the archive to itself)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run, parameter_flags=FLAGS, interrupted="finished results are kept; run it again to "
                                                               "continue")


def _check_azimuths(azimuths):
    import math

    from ..errors import ParameterError

    for azimuth in azimuths:
        # 400 and 40 are one direction: say so instead of storing another number than the one typed.
        if not 0.0 <= azimuth < 360.0:
            same = f" (the same direction as {azimuth % 360.0:g})" if math.isfinite(azimuth) else ""
            raise ParameterError(f"--azimuth must be in [0, 360) degrees; got {azimuth:g}{same}")


def run(args):
    from ..scenes.longwave_optics import DEFAULT_RESOLUTION, PER_CM
    from .simulate import simulate_archive

    _check_azimuths(args.azimuth)
    summary = simulate_archive(
        args.archive_dir, args.zenith, "random" if args.random_azimuth else args.azimuth, solvers=args.solvers,
        zenith_jitter=args.zenith_jitter,
        spectrum=args.spectrum, photons=args.photons, seed=args.seed,
        n_jobs=args.jobs, scheduler=args.scheduler, overwrite=args.overwrite, quiet=args.quiet,
        batch_size=args.batch_size, batches=args.batches, rays_per_column=args.rays_per_column, threads=args.threads,
        per_band=args.per_band, solar_constant=args.solar_constant,
        longwave_resolution=DEFAULT_RESOLUTION if args.longwave_resolution is None
        else args.longwave_resolution * PER_CM, longwave_boundary_rays=args.longwave_boundary_rays)
    shared = (f", {summary['by_other_runs']} computed meanwhile by another run on the archive"
              if summary["by_other_runs"] else "")
    print(f"simulate: {summary['computed']} runs computed, {summary['skipped']} already stored{shared}, "
          f"results in {args.archive_dir}")
