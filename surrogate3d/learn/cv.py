"""Scene-grouped data splits and the hyperparameter search.

Samples of one scene are strongly correlated (neighbouring columns, the same clouds
under several suns and host resolutions), so every split here keeps whole scenes
together: a scene never has samples on both sides.  Splitting by sample instead would
let a model be scored on near-copies of its training data and overstate its skill
(Roberts et al. 2017).
"""

from dataclasses import dataclass

import numpy as np
from sklearn.base import clone
from sklearn.model_selection import GroupKFold
from tqdm import tqdm

from ..core.validation import check_number
from ..errors import ValidationError
from .pairs_table import scene_table


@dataclass(frozen=True)
class SceneSplit:
    """Which scenes train the models and which are kept for evaluation.

    Attributes
    ----------
    training_scenes, held_out_scenes : list of str
        Disjoint; held-out scenes are whole scenes of unseen seeds, chosen per regime.
    """

    training_scenes: list
    held_out_scenes: list

    def as_dict(self):
        return {"training_scenes": list(self.training_scenes), "held_out_scenes": list(self.held_out_scenes)}


@dataclass(frozen=True)
class FamilySplit:
    """The scenes of one leave-one-family-out fit.

    Attributes
    ----------
    family : str
        The regime left out.
    training_scenes : list of str
        The run's training scenes outside ``family``.
    test_scenes : list of str
        Every scene of ``family`` (training and held-out scenes alike).
    """

    family: str
    training_scenes: list
    test_scenes: list


def family_splits(pairs, training_scenes, families):
    """Leave-one-family-out splits: for each family, training outside it, testing on all of it.

    Parameters
    ----------
    pairs : xarray.Dataset
        A pairs table holding the training scenes and every scene of the families.
    training_scenes : sequence of str
        Scenes the models of the run were trained on.
    families : sequence of str
        Regimes to leave out in turn.

    Returns
    -------
    list of FamilySplit
        In the order of ``families``.

    Raises
    ------
    surrogate3d.errors.ValidationError
        A family that is not a regime of ``pairs``, or that leaves no training scene.
    """
    table = scene_table(pairs)
    regimes = sorted({r for r, _ in table.values()})
    out = []
    for family in families:
        if family not in regimes:
            raise ValidationError(f"left-out family {family!r} is not a regime of the pairs table; it has {regimes}")
        training = [s for s in training_scenes if table[s][0] != family]
        if not training:
            raise ValidationError(f"leaving out family {family!r} leaves no training scene")
        out.append(FamilySplit(family, training, [s for s in table if table[s][0] == family]))
    return out


def split_scenes(pairs, held_out_fraction, seed=0):
    """Hold out whole scenes by seed, separately in every regime.

    In each regime ``round(held_out_fraction * n_seeds)`` seeds are drawn (at least one
    when the fraction is positive, at most ``n_seeds - 1`` so the regime keeps a
    training scene) and every scene of those seeds is held out.

    Parameters
    ----------
    pairs : xarray.Dataset
        A pairs table (needs ``scene``, ``regime``, ``seed``).
    held_out_fraction : float
        In [0, 1).
    seed : int
        Seed of the draw; regimes are visited in sorted order, so the split is reproducible.

    Returns
    -------
    SceneSplit
    """
    check_number("held_out_fraction", held_out_fraction, 0.0, 1.0, high_open=True, error=ValidationError)
    table = scene_table(pairs)
    rng = np.random.default_rng(seed)
    held = set()
    for regime in sorted({r for r, _ in table.values()}):
        seeds = sorted({s for r, s in table.values() if r == regime})
        n_hold = int(round(held_out_fraction * len(seeds)))
        if held_out_fraction > 0:
            n_hold = max(n_hold, 1)
        n_hold = min(n_hold, len(seeds) - 1)
        chosen = set(int(s) for s in rng.choice(seeds, size=n_hold, replace=False)) if n_hold > 0 else set()
        held |= {scene for scene, (r, s) in table.items() if r == regime and s in chosen}
    training = [scene for scene in table if scene not in held]
    if not training:
        raise ValidationError("no training scenes left after holding out scenes")
    return SceneSplit(training_scenes=training, held_out_scenes=sorted(held))


def scene_folds(scenes, n_folds):
    """Scene-grouped cross-validation folds.

    Parameters
    ----------
    scenes : array_like (n_sample,)
        Scene label of every sample.
    n_folds : int
        Requested folds; fewer when there are fewer scenes (at least 2 scenes needed).

    Returns
    -------
    list of (ndarray, ndarray)
        Training and test sample indices of each fold; no scene is on both sides.

    References
    ----------
    Hastie, T., R. Tibshirani and J. Friedman, 2009: The Elements of Statistical Learning,
    2nd ed., Springer, section 7.10 (K-fold cross-validation).

    Roberts, D. R. et al., 2017: Cross-validation strategies for data with temporal,
    spatial, hierarchical, or phylogenetic structure. Ecography, 40, 913-929 (blocking by group).
    """
    scenes = np.asarray(scenes).astype(str)
    n_scenes = np.unique(scenes).size
    if n_scenes < 2:
        raise ValidationError(f"cross-validation needs at least 2 groups (training scenes, or families); "
                              f"got {n_scenes}")
    folds = GroupKFold(n_splits=min(int(n_folds), n_scenes))
    return [(train, test) for train, test in folds.split(np.zeros(scenes.size), groups=scenes)]


def correction_skill(predicted, true, scale=None):
    """Skill of a correction per target: ``1 - RMSE(predicted - true) / RMSE(0 - true)``.

    1 is perfect; 0 is no better than no correction (the independent column).

    Parameters
    ----------
    predicted, true : ndarray (n_sample, n_target)
        Corrections [1, fractions of the incident flux].
    scale : ndarray (n_sample,), optional
        Factor applied to each sample's errors and truth before the RMSEs, the incident
        flux S0 cos(theta0) [W m-2] for the skill of the W m-2 errors (the skill every
        report quotes, :data:`surrogate3d.evaluation.metrics.HEADLINE_UNITS`); none: the
        skill of the fractions.

    Returns
    -------
    ndarray (n_target,)
    """
    if scale is not None:
        factor = np.asarray(scale, dtype=np.float64).reshape(-1, 1)
        predicted, true = predicted * factor, true * factor
    error = np.sqrt(np.mean((predicted - true) ** 2, axis=0))
    reference = np.sqrt(np.mean(true**2, axis=0))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(reference > 0, 1.0 - error / reference, np.nan)


@dataclass(frozen=True)
class SearchResult:
    """Outcome of :func:`grid_search`.

    Attributes
    ----------
    best_params : dict
    best_score : float
        Mean over folds of the target-averaged skill (of the W m-2 errors when the search
        had the incident flux).
    folds : int
        Folds actually used.
    scores : list of dict
        One entry per candidate: ``params``, ``mean_skill``, ``std_skill`` (over folds) and
        ``fold_skill`` (list, one per fold).
    """

    best_params: dict
    best_score: float
    folds: int
    scores: list

    def as_dict(self):
        return {"best_params": self.best_params, "best_score": self.best_score, "folds": self.folds,
                "scores": self.scores}


def grid_search(estimator, candidates, X, Y, scenes, n_folds, quiet=False, label="search", feature_names=None,
                incident_flux=None):
    """Pick hyperparameters by scene-grouped K-fold cross-validation.

    Every candidate is fitted on each fold's training scenes and scored on its test
    scenes by the skill of :func:`correction_skill`, averaged over targets; the best mean
    over folds wins (the first candidate on ties).  With ``incident_flux`` the skill is
    that of the W m-2 errors, the skill every report quotes.

    Parameters
    ----------
    estimator : estimator
        Template; cloned for every fit.
    candidates : list of dict
        Parameter combinations.
    X : ndarray (n_sample, n_feature)
    Y : ndarray (n_sample, n_target)
    scenes : ndarray (n_sample,)
        Scene of each sample (the CV groups).
    n_folds : int
    quiet : bool
        Hide the progress bar.
    label : str
        Progress-bar label.
    feature_names : list of str, optional
        Names of the columns of ``X``, passed to every ``fit`` (models that name
        features in their parameters need them).
    incident_flux : ndarray (n_sample,), optional
        S0 cos(theta0) of every sample [W m-2]; none: the skill of the fractions.

    Returns
    -------
    SearchResult
    """
    folds = scene_folds(scenes, n_folds)
    scores = []
    with tqdm(total=len(candidates) * len(folds), desc=label, unit="fit", disable=True if quiet else None,
              leave=False) as bar:
        for params in candidates:
            fold_skill = []
            for train, test in folds:
                model = clone(estimator).set_params(**params).fit(X[train], Y[train], feature_names=feature_names)
                scale = None if incident_flux is None else incident_flux[test]
                fold_skill.append(float(np.nanmean(correction_skill(model.predict(X[test]).reshape(Y[test].shape),
                                                                    Y[test], scale))))
                bar.update()
            scores.append({"params": params, "mean_skill": float(np.mean(fold_skill)),
                           "std_skill": float(np.std(fold_skill)), "fold_skill": fold_skill})
    best = max(range(len(scores)), key=lambda i: (scores[i]["mean_skill"], -i))
    return SearchResult(best_params=dict(scores[best]["params"]), best_score=scores[best]["mean_skill"],
                        folds=len(folds), scores=scores)
