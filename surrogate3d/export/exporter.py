"""Exporting trained models: coefficient files and, optionally, the Fortran module.

:func:`export_model` writes one model's NetCDF coefficient file and JSON twin (and, with
``fortran=True``, the Fortran module, driver and data files in ``fortran/``);
:func:`export_training_run` does it for the models of a model directory.
"""

from pathlib import Path

import numpy as np

from ..core.coefficient_file import read_coefficients
from ..core.pairs_table import read_pairs_table
from ..core.validation import check_integer
from ..errors import FormatError, ValidationError
from ..learn.model_directory import load_training_run
from ..learn.pairs_table import feature_matrix, select_scenes
from ..learn.longwave_profile_model import longwave_layer_fields
from ..learn.profile_model import layer_fields
from ..runtime.longwave_profile import longwave_layer_rows
from ..runtime.model import CorrectionModel
from ..runtime.profile import layer_rows
from .coefficients import build_document, write_coefficients
from .fortran import fortran_files, fortran_name, read_features_file, write_fortran
from .fortran_host import has_host_interface, host_files
from .fortran_longwave import has_longwave_host_interface, longwave_host_files
from .._atomic import write_text_atomic

#: Subdirectory of the export directory that holds the Fortran files.
FORTRAN_DIR = "fortran"


def sample_features(trained, pairs_path=None, n_columns=64):
    """Feature vectors of ``n_columns`` training columns, evenly spread over the training samples.

    Parameters
    ----------
    trained : surrogate3d.learn.TrainedModel
    pairs_path : str or Path, optional
        Pairs table; default the training file named in the model card.
    n_columns : int
        At least 1.

    Returns
    -------
    ndarray (n, n_feature)
        ``n = min(n_columns, number of training samples)``; for a profile model, rows of
        (column, layer) features (:func:`surrogate3d.runtime.profile.layer_rows`) evenly
        spread over the training columns' layers.
    """
    check_integer("n_columns (sample columns)", n_columns, 1, error=ValidationError)
    path = Path(pairs_path or trained.card["provenance"].get("pairs_file") or "")
    if not path.is_file():
        raise FormatError(f"the training pairs file {str(path)!r} of model {trained.name!r} does not exist; "
                          "name the pairs table to take the sample features from (--pairs)")
    pairs = read_pairs_table(path)
    scenes = trained.card["provenance"].get("training_scenes") or []
    training = select_scenes(pairs, scenes)
    if training.sizes["sample"] == 0:
        raise ValidationError(f"pairs file {str(path)!r} holds none of the training scenes of model {trained.name!r}")
    X = feature_matrix(training, trained.card["feature_names"], needed_by=f"model {trained.name!r}")
    if trained.kind == "profile":
        X, valid = layer_rows(X, layer_fields(training))
        X = X[valid]
    elif trained.kind == "longwave_profile":
        X, valid = longwave_layer_rows(X, longwave_layer_fields(training))
        X = X[valid]
    rows = np.unique(np.linspace(0, X.shape[0] - 1, min(n_columns, X.shape[0])).round().astype(int))
    return X[rows]


def export_model(trained, out_dir, report_dir=None, fortran=False, pairs_path=None, n_sample_columns=64):
    """Write the coefficient files of one trained model (and the Fortran files).

    Parameters
    ----------
    trained : surrogate3d.learn.TrainedModel
    out_dir : str or Path
        Created if missing.
    report_dir : str or Path, optional
        ``surrogate3d evaluate`` report whose ``metrics.csv`` rows of this model go
        into the file.
    fortran : bool
        Also write the Fortran module, driver, data file and sample files into
        ``out_dir/fortran/``.
    pairs_path : str or Path, optional
        Pairs table for the sample features (default: the training file).
    n_sample_columns : int
        Columns in the sample features file.

    Returns
    -------
    dict of str -> Path
        ``netcdf``, ``json`` and, with Fortran, ``module``, ``driver``,
        ``coefficients``, ``sample_features``, ``sample_corrections``.
    """
    document = build_document(trained, report_dir)
    netcdf, twin = write_coefficients(document, out_dir)
    paths = {"netcdf": netcdf, "json": twin}
    if fortran:
        features = sample_features(trained, pairs_path, n_sample_columns)
        corrections = CorrectionModel.from_document(document, str(twin)).predict(features, check_envelope=False)
        paths.update(write_fortran(document, Path(out_dir) / FORTRAN_DIR, features, corrections))
    return paths


def _exported_fortran_inputs(coefficients_path, fortran_dir):
    document = read_coefficients(coefficients_path)
    prefix = fortran_name(document["model"]["name"])
    features = read_features_file(Path(fortran_dir) / f"{prefix}_sample_features.txt")
    model = CorrectionModel.from_document(document, str(coefficients_path))
    return document, features, model.predict(features, check_envelope=False)


def regenerated_fortran(coefficients_path, fortran_dir):
    """The Fortran files of an exported model as this version's generator writes them.

    Parameters
    ----------
    coefficients_path : str or Path
        A coefficient file (NetCDF or JSON twin).
    fortran_dir : str or Path
        Its Fortran directory, whose sample features are kept (their corrections are
        computed again by the runtime).

    Returns
    -------
    dict of str -> (str, str)
        As :func:`~surrogate3d.export.fortran.fortran_files`.
    """
    return fortran_files(*_exported_fortran_inputs(coefficients_path, fortran_dir))


def refresh_fortran(coefficients_path, fortran_dir):
    """Rewrite the Fortran files of an exported model with this version's generator.

    ``models/default/fortran`` is refreshed this way whenever the generator changes
    (``tests/test_shipped_model.py`` checks that it is).  Parameters as for
    :func:`regenerated_fortran`.

    Returns
    -------
    dict of str -> Path
        As :func:`~surrogate3d.export.fortran.write_fortran`.
    """
    document, features, corrections = _exported_fortran_inputs(coefficients_path, fortran_dir)
    return write_fortran(document, fortran_dir, features, corrections)


def export_training_run(model_dir, out_dir, model=None, report_dir=None, fortran=False, pairs_path=None,
                        n_sample_columns=64):
    """Export the models of a model directory written by ``surrogate3d train``.

    Parameters
    ----------
    model_dir : str or Path
    out_dir : str or Path
    model : str, optional
        Export only this model; default every model of the run (with the profile model,
        if the run has one).
    report_dir, fortran, pairs_path, n_sample_columns
        As for :func:`export_model`.

    Returns
    -------
    dict of str -> dict
        Model name -> the paths :func:`export_model` returns.

    Raises
    ------
    surrogate3d.errors.ValidationError
        ``model`` is not a model of the run (the known ones are named).
    """
    run = load_training_run(model_dir)
    models = dict(run.models)
    if run.profile is not None:
        models[run.profile.name] = run.profile
    if model is not None and model not in models:
        raise ValidationError(f"model directory {str(model_dir)!r} has no model {model!r}; it has {sorted(models)}")
    names = [model] if model is not None else list(models)
    exported = {name: export_model(models[name], out_dir, report_dir, fortran, pairs_path, n_sample_columns)
                for name in names}
    if fortran:
        profile = run.profile.name if run.profile is not None and run.profile.name in exported else None
        profile_document = read_coefficients(exported[profile]["json"]) if profile else None
        for paths in exported.values():
            document = read_coefficients(paths["json"])
            if has_host_interface(document) or has_longwave_host_interface(document):
                paths.update(write_host_fortran(document, Path(out_dir) / FORTRAN_DIR, profile_document))
    return exported


def refresh_host_fortran(coefficients_path, fortran_dir, profile_coefficients_path=None):
    """Rewrite the host interface of an exported column model with this version's generator.

    ``models/default/fortran`` (with the heating-rate model beside it) and
    ``models/longwave/fortran`` are refreshed this way whenever the generator changes;
    ``tests/test_shipped_model.py`` checks that they are.

    Parameters
    ----------
    coefficients_path : str or Path
        The column model's coefficient file.
    fortran_dir : str or Path
    profile_coefficients_path : str or Path, optional
        The heating-rate model's coefficient file.

    Returns
    -------
    dict of str -> Path
        As :func:`write_host_fortran`.
    """
    profile = read_coefficients(profile_coefficients_path) if profile_coefficients_path else None
    return write_host_fortran(read_coefficients(coefficients_path), fortran_dir, profile)


def write_host_fortran(document, fortran_dir, profile_document=None):
    """Write the host interface of a column model (:func:`surrogate3d.export.fortran_host.host_files`, or for a
    longwave model :func:`surrogate3d.export.fortran_longwave.longwave_host_files`).

    Parameters
    ----------
    document : dict
        A column model's checked coefficient document.
    fortran_dir : str or Path
    profile_document : dict, optional
        A (shortwave) heating-rate model's document, exported beside it.

    Returns
    -------
    dict of str -> Path
        ``host_module``, ``host_driver``, ``features_module``, ``halo`` (and, with a shortwave heating-rate
        model of other features, ``profile_features_module``).
    """
    prefix = fortran_name(document["model"]["name"])
    keys = {f"{prefix}_host.f90": "host_module", f"{prefix}_host_driver.f90": "host_driver",
            f"{prefix}_features.f90": "features_module", f"{prefix}_halo.md": "halo"}
    files = (longwave_host_files(document) if has_longwave_host_interface(document)
             else host_files(document, profile_document))
    paths = {}
    for name, text in files.items():
        write_text_atomic(Path(fortran_dir) / name, text)
        paths[keys.get(name, "profile_features_module")] = Path(fortran_dir) / name
    return paths
