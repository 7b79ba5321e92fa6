"""Worked example: bring benchmark output of your own into the surrogate3d archive format.

The scene here is made by a generator unlike the demo's (a few ellipsoidal "bubble" clouds
placed by hand), and its "benchmark output" is laid out the way another code might write
it: arrays ordered (x, y, z), fluxes in W m-2, the sun azimuth given as the sun's position
clockwise from north.  The script converts both into one archive scene file, then builds
training pairs from it with the usual command.  Here our own solvers stand in for your
code; replace ``your_benchmark_output`` by a reader of your files.

Run:  python docs/examples/bring_your_own.py OUT_DIR
"""

import sys
from pathlib import Path

import numpy as np

from surrogate3d.archive import insert_result, list_archive, make_run_result, write_scene
from surrogate3d.scenes import make_scene
from surrogate3d.solvers import solve_monte_carlo

S0 = 1361.0  # W m-2, the solar constant of "your" runs


def bubble_clouds(nx=40, ny=40, nz=20, dx=100.0, dz=100.0):
    """Extinction [m-1] of three ellipsoidal clouds on an (x, y, z)-ordered grid."""
    x, y, z = np.meshgrid((np.arange(nx) + 0.5) * dx, (np.arange(ny) + 0.5) * dx, (np.arange(nz) + 0.5) * dz,
                          indexing="ij")
    ext = np.full((nx, ny, nz), 1.2e-5)  # clear-air Rayleigh extinction in the visible
    for cx, cy, cz, a, c, beta in ((1000, 1200, 1100, 500, 400, 0.04), (2800, 2600, 1300, 600, 600, 0.06),
                                   (2600, 900, 900, 300, 250, 0.03)):
        inside = ((x - cx) / a) ** 2 + ((y - cy) / a) ** 2 + ((z - cz) / c) ** 2 <= 1.0
        ext[inside] = beta
    return ext, dx, dz


def to_scene(ext_xyz, dx, dz):
    """Archive scene from (x, y, z) arrays: reorder to (band, z, y, x), one visible band."""
    ext = np.transpose(ext_xyz, (2, 1, 0))[None]
    cloudy = ext > 1e-4
    ssa = np.where(cloudy, 0.99999, 1.0)
    g = np.where(cloudy, 0.86, 0.0)  # Rayleigh: g = 0
    z_edge = np.arange(ext.shape[1] + 1) * dz
    return make_scene(ext, ssa, g, z_edge, dx, dx, surface_albedo=0.1, band=["visible"],
                      attrs={"regime": "bubble_clouds", "seed": 0, "source": "bring_your_own.py example"})


def beam_azimuth_from_sun_position(azimuth_clockwise_from_north):
    """Direction of travel of the beam (counterclockwise from +x = east) from the sun's
    position (clockwise from north): the beam travels away from the sun."""
    return (270.0 - azimuth_clockwise_from_north) % 360.0


def your_benchmark_output(scene, zenith, sun_azimuth, independent):
    """Stand-in for your code: fluxes in W m-2 on (x, y) arrays."""
    run = solve_monte_carlo(scene, zenith, beam_azimuth_from_sun_position(sun_azimuth), photons=40000, seed=3,
                            independent_columns=independent)
    watts = S0 * np.cos(np.radians(zenith))
    out = {name: run[name].values.T * watts for name in ("toa_upward_flux", "surface_downward_direct_flux",
                                                       "surface_downward_diffuse_flux", "surface_upward_flux",
                                                       "atmosphere_absorption")}
    out["errors"] = {name: run[name + "_standard_error"].values.T * watts for name in out}
    out["absorption"] = np.transpose(run["absorption"].values, (2, 1, 0)) * watts
    return out


def to_run_result(output, zenith, sun_azimuth, solver):
    """Archive run result from the (x, y) W m-2 arrays: transpose and divide by S0 cos(theta0)."""
    watts = S0 * np.cos(np.radians(zenith))
    fluxes = {name: value.T / watts for name, value in output.items() if name not in ("errors", "absorption")}
    errors = {name: value.T / watts for name, value in output["errors"].items()}
    absorption = np.transpose(output["absorption"], (2, 1, 0)) / watts
    return make_run_result(fluxes, errors, absorption, solver=solver, solar_zenith_angle=zenith,
                           solar_beam_azimuth=beam_azimuth_from_sun_position(sun_azimuth),
                           metadata={"run_photons": 40000, "run_seed": 3, "run_scattering_events": 0,
                                     "run_wall_time": 0.0, "run_solar_constant": S0,
                                     "run_package_version": "your-code 1.0"})


def main(out_dir):
    out_dir = Path(out_dir)
    archive = out_dir / "my_archive"
    archive.mkdir(parents=True, exist_ok=True)
    scene = to_scene(*bubble_clouds())
    for zenith, sun_azimuth in ((20.0, 180.0), (60.0, 135.0)):  # sun in the south, then south-east
        for solver, independent in (("full_3d", False), ("independent_column", True)):
            output = your_benchmark_output(scene, zenith, sun_azimuth, independent)
            scene = insert_result(scene, to_run_result(output, zenith, sun_azimuth, solver))
    write_scene(scene, archive / "bubble_clouds_00000.nc")
    print(list_archive(archive).to_string(index=False))
    return archive


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "byo-output")
