"""Cloud-field families: reproducibility, promised cloud fraction and optical depth, structural signatures."""

import json
from dataclasses import replace

import numpy as np
import pytest
from scipy import ndimage

from surrogate3d.errors import ParameterError
from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.model import cloud_mask, layer_thickness
from surrogate3d.scenes.optics import cloud_extinction
from surrogate3d.scenes.random_fields import bounded_cascade, random_generator
from surrogate3d.scenes.regimes import REGIMES, CloudLayer
from surrogate3d.scenes.structures import (CascadeField, CellularField, ClusteredField, StreetField,
                                           structure_from_dict)
from surrogate3d.scenes.validation import validate_scene

FAMILIES = ["clustered_cumulus", "cloud_streets", "sheared_cumulus", "intermittent_stratocumulus", "open_cells",
            "closed_cells"]
SMALL = {"nx": 40, "ny": 32, "nz": 12, "top": 3000.0}


def _cloud_tau(scene):
    """Cloud-only column optical depth from the stored water (Stephens 1978)."""
    lwc = scene["liquid_water_content"].values
    r = np.where(lwc > 0, scene["effective_radius"].values, 1.0)
    return (cloud_extinction(lwc, r) * layer_thickness(scene)[:, None, None]).sum(axis=0)


def _with_layer(name, **changes):
    """The regime with its main layer changed; ``structure`` takes a dict of structure changes."""
    regime = REGIMES[name]
    layer = regime.layers[0]
    if "structure" in changes:
        changes["structure"] = replace(layer.structure, **changes["structure"])
    return replace(regime, layers=(replace(layer, **changes),) + regime.layers[1:])


def _drawn(scene):
    return json.loads(scene.attrs["generator_parameters"])["drawn"][0]


def _periodic_labels(mask):
    """Connected regions (4-neighbour) of a mask on the periodic grid: (labels, count)."""
    labels, n = ndimage.label(mask)
    parent = np.arange(n + 1)

    def root(a):
        while parent[a] != a:
            a = parent[a]
        return a

    for a, b in list(zip(labels[0], labels[-1])) + list(zip(labels[:, 0], labels[:, -1])):
        if a and b and root(a) != root(b):
            parent[root(a)] = root(b)
    roots = np.array([root(i) for i in range(n + 1)])
    _, compact = np.unique(roots, return_inverse=True)
    return compact[labels], int(compact.max())


def _object_centres(mask):
    """Centres (x, y) [cells] of the cloud objects, periodic means of their cells."""
    labels, n = _periodic_labels(mask)
    ny, nx = mask.shape
    centres = []
    for k in range(1, n + 1):
        jj, ii = np.nonzero(labels == k)
        cx = np.angle(np.exp(2j * np.pi * ii / nx).mean()) % (2 * np.pi) * nx / (2 * np.pi)
        cy = np.angle(np.exp(2j * np.pi * jj / ny).mean()) % (2 * np.pi) * ny / (2 * np.pi)
        centres.append((cx, cy))
    return np.array(centres)


def _clark_evans(centres, shape):
    """Mean nearest-neighbour distance over its Poisson value 1 / (2 sqrt(density)) (Clark and Evans 1954)."""
    ny, nx = shape
    d = np.abs(centres[:, None, :] - centres[None, :, :])
    d = np.minimum(d, np.array([nx, ny]) - d)
    r = np.hypot(d[..., 0], d[..., 1])
    np.fill_diagonal(r, np.inf)
    return r.min(axis=1).mean() / (0.5 / np.sqrt(len(centres) / (nx * ny)))


def _autocorrelation(field):
    """Periodic autocorrelation by the Wiener-Khinchin theorem (inverse transform of the power)."""
    f = field - field.mean()
    c = np.real(np.fft.ifft2(np.abs(np.fft.fft2(f)) ** 2))
    return c / c[0, 0]


@pytest.mark.parametrize("name", FAMILIES)
def test_family_gives_valid_scenes_that_repeat_for_a_seed(name):
    a = generate_scene(name, 11, **SMALL)
    b = generate_scene(name, 11, **SMALL)
    c = generate_scene(name, 12, **SMALL)
    validate_scene(a)
    assert a.identical(b)
    assert not np.array_equal(a["liquid_water_content"].values, c["liquid_water_content"].values)
    assert a.attrs["regime"] == name


@pytest.mark.parametrize("name", [n for n in FAMILIES if n != "sheared_cumulus"])
def test_family_meets_its_cloud_fraction_and_mean_optical_depth(name):
    layer = REGIMES[name].layers[0]
    scene = generate_scene(name, 4, **SMALL)
    cloudy = cloud_mask(scene).any(axis=0)
    assert cloudy.sum() == round(layer.cloud_fraction * cloudy.size)
    assert _cloud_tau(scene)[cloudy].mean() == pytest.approx(layer.mean_optical_depth, rel=1e-9)


def test_tilted_clouds_keep_their_footprint_fraction_and_optical_depth():
    # Tilting only moves each level's water, so the domain-mean optical depth stays
    # cloud_fraction * mean_optical_depth, while the clouds shade more columns.
    layer = REGIMES["sheared_cumulus"].layers[0]
    scene = generate_scene("sheared_cumulus", 4, **SMALL)
    tau = _cloud_tau(scene)
    assert tau.mean() == pytest.approx(layer.cloud_fraction * layer.mean_optical_depth, rel=1e-9)
    assert scene.attrs["total_cloud_fraction"] > layer.cloud_fraction


def test_clustered_cloud_positions_follow_the_thomas_pair_correlation():
    # Thomas (1949) cluster process: g(r) = 1 + exp(-r^2 / (4 s^2)) / (4 pi kappa s^2), with
    # kappa the cluster density and s the cluster radius (e.g. Illian et al. 2008, from memory);
    # a Poisson process has g = 1.
    field = ClusteredField(cluster_spacing=4000.0, cluster_radius=500.0, clouds_per_cluster=10.0)
    size, edges = 40000.0, np.arange(0.0, 3001.0, 250.0)
    pairs, points = np.zeros(edges.size - 1), 0
    for seed in range(6):
        p, _ = field.cloud_positions((400, 400), 100.0, random_generator(seed))
        d = np.abs(p[:, None, :] - p[None, :, :])
        d = np.minimum(d, size - d)
        r = np.hypot(d[..., 0], d[..., 1])[np.triu_indices(len(p), 1)]
        pairs += 2 * np.histogram(r, edges)[0]
        points += len(p)
    density = points / 6 / size ** 2
    ring = np.pi * (edges[1:] ** 2 - edges[:-1] ** 2)
    g = pairs / points / (density * ring)
    r = 0.5 * (edges[1:] + edges[:-1])
    expected = 1.0 + np.exp(-r ** 2 / (4 * 500.0 ** 2)) / (4 * np.pi * 500.0 ** 2 / 4000.0 ** 2)
    assert g[0] > 4.0
    assert np.allclose(g, expected, rtol=0.12, atol=0.12)


def test_clustered_scenes_have_clouds_closer_together_than_poisson():
    # Clark and Evans (1954): the mean nearest-neighbour distance over its Poisson value is
    # about 1 for random positions and below 1 for clustered ones (common practice for cloud
    # fields, e.g. Weger et al. 1992).  The power-law field is the control.
    def ratio(name):
        values = []
        for seed in range(6):
            mask = cloud_mask(generate_scene(name, seed, nx=160, ny=160, nz=6, top=2000.0)).any(axis=0)
            centres = _object_centres(mask)
            if len(centres) >= 10:
                values.append(_clark_evans(centres, mask.shape))
        return float(np.mean(values))

    assert ratio("clustered_cumulus") < 0.92
    assert ratio("scattered_cumulus") > 1.0


def test_street_field_has_the_autocorrelation_of_its_spectrum():
    # Wiener-Khinchin: along the streets exp(-r^2 / L^2), across them
    # cos(2 pi r / lambda) exp(-2 pi^2 (b / lambda)^2 r^2).
    field = StreetField(roll_wavelength=2000.0, street_length=6000.0, bandwidth=0.15, direction=0.0,
                        irregularity=0.0)
    c = np.mean([_autocorrelation(field.realise((256, 256), 100.0, random_generator(s)).field) for s in range(4)],
                axis=0)
    lags = np.array([10, 20, 30, 60])
    assert np.allclose(c[0, lags], np.exp(-(lags * 100.0 / 6000.0) ** 2), atol=0.05)
    half = c[10, 0]
    assert half == pytest.approx(-np.exp(-2 * np.pi ** 2 * (0.15 / 2000.0) ** 2 * 1000.0 ** 2), abs=0.1)


def test_cloud_streets_are_longer_along_than_across():
    # Correlation length (lag where the autocorrelation falls below 1/e, common practice) of
    # the cloud mask along the streets over that across them.
    regime = _with_layer("cloud_streets", structure={"direction": 90.0})
    ratios = []
    for seed in range(3):
        mask = cloud_mask(generate_scene(regime, seed, nx=96, ny=96, nz=6, top=2000.0)).any(axis=0)
        c = _autocorrelation(mask.astype(float))
        ratios.append(np.argmax(c[:48, 0] < np.exp(-1)) / np.argmax(c[0, :48] < np.exp(-1)))
    assert min(ratios) > 2.0


def test_street_direction_is_drawn_from_the_seed_when_not_given():
    a, b = (_drawn(generate_scene("cloud_streets", s, **SMALL))["direction"] for s in (1, 2))
    assert 0.0 <= a < 180.0 and 0.0 <= b < 180.0 and a != b
    assert _drawn(generate_scene("cloud_streets", 1, **SMALL))["direction"] == a


def test_tilted_cloud_moves_by_tilt_times_height():
    # A cloud leaning by tilt (horizontal displacement per height) has its centre displaced by
    # tilt * (z - z_base) (kinematics of a sheared cloud, common practice).  The shift between
    # adjacent levels is where their cloud masks overlap most.
    scene = generate_scene(_with_layer("sheared_cumulus", tilt=0.6, tilt_direction=0.0), 2,
                           nx=64, ny=64, nz=24, top=3000.0)
    lwc = scene["liquid_water_content"].values > 0
    z = scene["z"].values
    levels = [k for k in range(lwc.shape[0]) if lwc[k].sum() >= 20]
    heights, displacement, total = [], [], 0
    for k0, k1 in zip(levels[:-1], levels[1:]):
        overlap = [np.sum(lwc[k1] & np.roll(lwc[k0], s, axis=1)) for s in range(-3, 4)]
        total += int(np.argmax(overlap)) - 3
        assert np.sum(lwc[k1] & np.roll(lwc[k0], 1, axis=0)) < max(overlap)  # no shift in y
        heights.append(z[k1])
        displacement.append(total * 100.0)
    slope = np.polyfit(heights, displacement, 1)[0]
    assert slope == pytest.approx(0.6, abs=0.06)
    assert heights[-1] - heights[0] > 1000.0


def test_tilt_direction_is_drawn_from_the_seed():
    direction = _drawn(generate_scene("sheared_cumulus", 3, **SMALL))["tilt_direction"]
    assert 0.0 <= direction < 360.0
    assert _drawn(generate_scene("sheared_cumulus", 3, **SMALL))["tilt_direction"] == direction


def test_bounded_cascade_keeps_block_means_and_its_exact_variance():
    # Cahalan et al. (1994): each split multiplies the halves of a block by 1 +- f_n, so each
    # half keeps its share; with equal halves the mean square grows by (1 + f_n^2) per split.
    f0, h = 0.5, 1.0 / 3.0
    w = bounded_cascade((64, 64), random_generator(5), f0, h)
    assert w.mean() == pytest.approx(1.0, abs=1e-12)
    assert w[:, :32].mean() in (pytest.approx(1 + f0, abs=1e-12), pytest.approx(1 - f0, abs=1e-12))
    quarter = w[:32, :32].mean() / w[:, :32].mean()
    assert quarter in (pytest.approx(1 + f0, abs=1e-12), pytest.approx(1 - f0, abs=1e-12))
    f = f0 * 2.0 ** (-np.arange(6) * h)
    assert (w ** 2).mean() == pytest.approx(np.prod((1 + f ** 2) ** 2), rel=1e-12)
    odd = bounded_cascade((37, 29), random_generator(5), f0, h)
    assert odd.mean() == pytest.approx(1.0, abs=1e-12) and odd.min() > 0


def test_intermittent_deck_is_far_more_inhomogeneous_than_the_power_law_deck():
    # Inhomogeneity factor chi = exp(<ln tau>) / <tau> of cloudy columns (Cahalan et al. 1994):
    # 1 for a uniform cloud, smaller for inhomogeneous ones.
    def chi(name):
        tau = _cloud_tau(generate_scene(name, 1, nx=64, ny=64, nz=12, top=2000.0))
        tau = tau[tau > 0]
        return np.exp(np.log(tau).mean()) / tau.mean()

    assert chi("intermittent_stratocumulus") < chi("broken_stratocumulus") - 0.1


def test_cells_are_open_or_closed():
    # Open cells: cloudy walls (one network) around clear cells; closed cells: cloudy cells
    # parted by clear walls (Agee et al. 1973).  One region per cell; a cell cut by a wall one
    # grid cell thin may count twice.
    for name, cloudy_network in (("open_cells", True), ("closed_cells", False)):
        regime = _with_layer(name, structure={"cell_diameter": 2500.0, "roughness": 0.0})
        for seed in range(3):
            scene = generate_scene(regime, seed, nx=80, ny=80, nz=6, top=2000.0)
            cloudy = cloud_mask(scene).any(axis=0)
            network, cells = (cloudy, ~cloudy) if cloudy_network else (~cloudy, cloudy)
            assert _periodic_labels(network)[1] == 1, (name, seed)
            assert 0 <= _periodic_labels(cells)[1] - _drawn(scene)["cells"] <= 1, (name, seed)


def test_cell_walls_from_windows_equal_those_from_every_centre():
    # The nearest two centres of a column, found within windows around each centre (with the
    # fallback for columns the windows may miss), equal those of a plain search over all centres.
    from surrogate3d.scenes.structures import _nearest_two_centres

    shape, dx = (150, 120), 100.0
    ny, nx = shape
    x, y = (np.arange(nx) + 0.5) * dx, (np.arange(ny) + 0.5) * dx
    for regularity in (0.0, 0.6):
        centres = CellularField(cell_diameter=1000.0, regularity=regularity).centres(shape, dx, random_generator(1))
        nearest, second, _, _ = _nearest_two_centres(centres, shape, dx, 1500.0)
        ux = (x[None, None, :] - centres[:, 0, None, None] + 0.5 * nx * dx) % (nx * dx) - 0.5 * nx * dx
        uy = (y[None, :, None] - centres[:, 1, None, None] + 0.5 * ny * dx) % (ny * dx) - 0.5 * ny * dx
        plain = np.sort((ux * ux + uy * uy).reshape(len(centres), -1), axis=0)
        assert np.array_equal(nearest, plain[0]) and np.array_equal(second, plain[1])


@pytest.mark.parametrize("make, message", [
    (lambda: ClusteredField(cluster_spacing=0.0), "cluster_spacing must be in (0, 1e+06]; got 0.0"),
    (lambda: ClusteredField(clouds_per_cluster=0.5), "clouds_per_cluster must be in [1, 1000]; got 0.5"),
    (lambda: StreetField(direction=180.0), "direction must be in [0, 180); got 180.0"),
    (lambda: StreetField(irregularity=1.5), "irregularity must be in [0, 1]; got 1.5"),
    (lambda: StreetField(roll_wavelength="wide"), "roll_wavelength must be a number; got 'wide'"),
    (lambda: CellularField("hexagonal"), "cell_type must be one of closed, open; got 'hexagonal'"),
    (lambda: CellularField(regularity=0.9), "regularity must be in [0, 0.75]; got 0.9"),
    (lambda: CascadeField(variability=1.0), "variability must be in (0, 1); got 1.0"),
    (lambda: CascadeField(hurst=0.0), "hurst must be in (0, 1]; got 0.0"),
])
def test_bad_structure_parameters_are_named(make, message):
    with pytest.raises(ParameterError) as err:
        make().validate()
    assert message in str(err.value) and "\n" not in str(err.value)


@pytest.mark.parametrize("changes, message", [
    ({"tilt": 6.0}, "tilt must be in [0, 5]; got 6.0"),
    ({"tilt_direction": -10.0}, "tilt_direction must be in [0, 360); got -10.0"),
    ({"structure": "streets"}, "structure must be one of ClusteredField, StreetField"),
    ({"structure": StreetField(bandwidth=0.0)}, "structure: bandwidth must be in (0, 2]; got 0.0"),
])
def test_bad_layer_parameters_are_named(changes, message):
    with pytest.raises(ParameterError) as err:
        generate_scene(replace(REGIMES["cloud_streets"], layers=(
            replace(REGIMES["cloud_streets"].layers[0], **changes),)), 0, **SMALL)
    assert message in str(err.value) and "layer 0" in str(err.value)


def test_structures_from_tables():
    changed = structure_from_dict({"roll_wavelength": 2500.0}, StreetField(direction=10.0), "s")
    assert (changed.roll_wavelength, changed.direction) == (2500.0, 10.0)
    assert structure_from_dict({"kind": "cascade"}, StreetField()).kind == "cascade"
    with pytest.raises(ParameterError, match="s kind must be one of clustered, streets, cellular, cascade"):
        structure_from_dict({"kind": "rolls"}, None, "s")
    with pytest.raises(ParameterError, match=r"s \(streets\) has unknown parameter 'spacing'"):
        structure_from_dict({"kind": "streets", "spacing": 3.0}, None, "s")
    with pytest.raises(ParameterError, match="s needs a kind"):
        structure_from_dict({"roll_wavelength": 3.0}, None, "s")


def test_families_keep_to_their_layer_parameters():
    for name in FAMILIES:
        layer = REGIMES[name].layers[0]
        assert isinstance(layer, CloudLayer) and (layer.structure is not None or layer.tilt > 0)
        assert REGIMES[name].validate() is REGIMES[name]
