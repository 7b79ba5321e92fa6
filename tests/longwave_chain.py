"""A tiny longwave world taken through the whole chain, shared by the longwave pipeline tests:
eight scenes of two regimes (12 x 12 x 6 cells of 100 m) with their longwave results, the
pairs at 300 m host columns, a training run of a recipe, its report and its export."""

from surrogate3d.archive import write_scene
from surrogate3d.archive.simulate import simulate_archive
from surrogate3d.cli import main
from surrogate3d.core.netcdf import write_dataset
from surrogate3d.evaluation.report import evaluate, write_report
from surrogate3d.learn.train import train_models
from surrogate3d.pairs.longwave_pairs import build_longwave_pairs
from surrogate3d.scenes.generator import generate_scene

#: Host column size [m]: 3 x 3 cells, a 4 x 4 host grid.
HOST = 300.0
REGIMES = ("scattered_cumulus", "broken_stratocumulus")


def build_longwave_chain(root, recipe, learning_curve_points=0, importance_repeats=0):
    """Scenes, longwave results, pairs, models of ``recipe`` (TOML text), report and export under ``root``.

    Returns
    -------
    dict
        ``root``, ``archive`` (paths) and ``evaluation`` (the report's Evaluation).
    """
    archive = root / "archive"
    archive.mkdir()
    for regime in REGIMES:
        for seed in range(4):
            write_scene(generate_scene(regime, seed, nx=12, ny=12, nz=6), archive / f"{regime}_{seed:05d}.nc")
    simulate_archive(archive, solvers=["full_3d", "independent_column", "two_stream"], spectrum="longwave",
                     photons=20000, seed=3, quiet=True, longwave_resolution=10000.0, n_jobs=1)
    write_dataset(build_longwave_pairs(archive, [HOST], quiet=True), root / "pairs.nc")
    (root / "recipe.toml").write_text(recipe)
    train_models(root / "pairs.nc", root / "recipe.toml", root / "models", quiet=True)
    evaluation = evaluate(root / "models", root / "pairs.nc", learning_curve_points=learning_curve_points,
                          importance_repeats=importance_repeats, quiet=True)
    write_report(evaluation, root / "report", map_scenes=1)
    assert main(["export", str(root / "models"), "--out", str(root / "export"), "--report", str(root / "report"),
                 "--fortran", "--quiet"]) == 0
    return {"root": root, "archive": archive, "evaluation": evaluation}
