"""Synthetic training-pair tables with a known correction, for the tests (not shipped in the package).

:func:`make_synthetic_pairs` writes tables in exactly the layout of
``docs/pairs-format.md`` whose targets follow a prescribed function of the features plus
Gaussian noise of a prescribed standard error.  Because the noise-free correction is
known, skill, noise-floor and energy-balance numbers computed on these tables can be
checked against what they must be.  The fluxes are simple closed forms, not radiative
transfer: they only need to be plausible in size and sign.
"""

import hashlib
import json

import numpy as np
import xarray as xr

from surrogate3d.core.config import SOLAR_CONSTANT
from surrogate3d.core.data_model import TARGETS

#: Feature names of the synthetic tables, with units.
SYNTHETIC_FEATURES = {
    "cloud_fraction": "1",
    "cloud_optical_depth": "1",
    "cos_solar_zenith": "1",
    "upsun_cloud_fraction": "1",
    "neighbour_cloud_fraction": "1",
    "cloud_edge_distance": "m",
    "surface_albedo": "1",
}

#: e-folding distance of the near-cloud diffuse enhancement in the synthetic relation [m].
EDGE_SCALE = 500.0

#: Edge distance given to columns of a host grid without any cloud [m].
NO_CLOUD_DISTANCE = 20_000.0

_FINE = 16


def _smooth_field(rng, n, length):
    """A periodic Gaussian random field on n x n cells with correlation length ``length`` cells."""
    k = np.fft.fftfreq(n)
    k2 = k[:, None] ** 2 + k[None, :] ** 2
    spectrum = np.exp(-2.0 * (np.pi * length) ** 2 * k2)
    noise = np.fft.fft2(rng.normal(size=(n, n)))
    return np.real(np.fft.ifft2(noise * np.sqrt(spectrum)))


def _edge_distance(cloudy, dx):
    """Distance [m] from each host column centre to the nearest cloudy column (periodic)."""
    ny, nx = cloudy.shape
    iy, ix = np.nonzero(cloudy)
    if iy.size == 0:
        return np.full(cloudy.shape, NO_CLOUD_DISTANCE)
    gy, gx = np.mgrid[0:ny, 0:nx]
    ddy = np.abs(gy[..., None] - iy)
    ddx = np.abs(gx[..., None] - ix)
    ddy = np.minimum(ddy, ny - ddy)
    ddx = np.minimum(ddx, nx - ddx)
    return dx * np.sqrt(ddy**2 + ddx**2).min(axis=-1)


def true_correction(features):
    """The prescribed noise-free correction of the synthetic tables.

    Parameters
    ----------
    features : dict of str -> ndarray
        The arrays named in :data:`SYNTHETIC_FEATURES` (``cloud_edge_distance`` in m).

    Returns
    -------
    dict of target name -> ndarray [1]
        Before the per-domain energy closure that :func:`make_synthetic_pairs` applies to
        ``toa_upward_flux``.

    Notes
    -----
    With ``c`` the cloud fraction, ``u`` the up-sun neighbour's cloud fraction, ``mu``
    the cosine of the solar zenith angle and ``g = exp(-d / 500 m)`` for edge distance
    ``d``::

        direct  = -0.3 (1 - mu) (u - c)               (shadows move down-sun)
        diffuse = 0.06 g (1 - c) + 0.1 c (1 - c) (1 - mu)
        total   = direct + diffuse
        absorb  = 0.01 c (1 - mu)
        toa     = -(1 - a) diffuse - absorb - 0.1 (1 - mu) (u - c)

    with ``a`` the surface albedo: the TOA term returns to space what the diffuse and
    absorption terms take, plus a redistribution between sunlit and shaded columns, so
    that the domain mean of the energy residual is already small (it is
    ``0.3 (1 - mu) mean((u - c) a)``).  All vanish for a clear column whose neighbours
    are clear and that lies far from cloud (``c = u = 0``, ``g -> 0``).
    """
    c, u = features["cloud_fraction"], features["upsun_cloud_fraction"]
    mu = features["cos_solar_zenith"]
    g = np.exp(-features["cloud_edge_distance"] / EDGE_SCALE)
    direct = -0.3 * (1.0 - mu) * (u - c)
    diffuse = 0.06 * g * (1.0 - c) + 0.1 * c * (1.0 - c) * (1.0 - mu)
    absorb = 0.01 * c * (1.0 - mu)
    toa = -(1.0 - features["surface_albedo"]) * diffuse - absorb - 0.1 * (1.0 - mu) * (u - c)
    return {"surface_downward_flux": direct + diffuse, "surface_downward_direct_flux": direct,
            "surface_downward_diffuse_flux": diffuse, "toa_upward_flux": toa, "atmosphere_absorption": absorb}


def make_synthetic_pairs(regimes=(("sparse", 0.2), ("dense", 0.6)), seeds_per_regime=4,
                         host_grids=((8, 1000.0), (4, 2000.0)), solar_zenith_angles=(20.0, 45.0, 65.0),
                         noise=0.004, seed=0, solar_constant=SOLAR_CONSTANT):
    """A training-pair table with a known correction and known Monte Carlo noise.

    Parameters
    ----------
    regimes : sequence of (str, float)
        Regime names and their mean cloud cover [1].
    seeds_per_regime : int
        Scenes per regime (seeds 0 .. n-1).
    host_grids : sequence of (int, float)
        Host grid size (n x n columns) and host resolution [m] of each coarse-graining;
        every scene is 8 km wide at 1 km resolution by default.
    solar_zenith_angles : sequence of float
        Sun geometries [degree]; the beam azimuth alternates between 0 and 90 degrees.
    noise : float
        Scale of the target standard error [1]: ``se = noise * (0.5 + cloud_fraction)``,
        except for the direct flux, whose standard error is ``2 * noise`` times the
        noise-free 3D direct flux (weak beams are nearly noise-free, so the 3D direct flux
        stays non-negative), and the absorption, whose standard error is a quarter of the
        rule.  0 gives noise-free targets.
    seed : int
        Seed of the whole table.
    solar_constant : float
        [W m-2]; ``incident_flux = solar_constant * cos(solar_zenith_angle)``.

    Returns
    -------
    xarray.Dataset
        A pairs table (``docs/pairs-format.md``) with one extra variable,
        ``noise_free_target`` (sample, target): the exact correction before noise.
        Baselines are fabricated with known skill on noise-free targets: the tilted
        independent column predicts half the true correction (skill 0.5), the non-local
        independent pixel 80 % of it (skill 0.8).
    """
    rows = []
    for r, (regime, cover) in enumerate(regimes):
        for s in range(seeds_per_regime):
            rng = np.random.default_rng([seed, r, s])
            field = _smooth_field(rng, _FINE, length=1.5)
            cloudy = field > np.quantile(field, 1.0 - cover)
            tau_fine = np.where(cloudy, rng.lognormal(np.log(12.0), 0.5, size=cloudy.shape), 0.0)
            albedo_fine = np.clip(0.12 + 0.04 * _smooth_field(rng, _FINE, length=3.0), 0.02, 0.3)
            for n_host, resolution in host_grids:
                block = _FINE // n_host
                shape = (n_host, block, n_host, block)
                cf = cloudy.reshape(shape).mean(axis=(1, 3))
                tau = tau_fine.reshape(shape).sum(axis=(1, 3)) / np.maximum(cloudy.reshape(shape).sum(axis=(1, 3)), 1)
                albedo = albedo_fine.reshape(shape).mean(axis=(1, 3))
                edge = _edge_distance(cf > 0, resolution)
                neighbour = sum(np.roll(cf, (dy, dx), axis=(0, 1)) for dy in (-1, 0, 1) for dx in (-1, 0, 1)) / 9.0
                for k, zenith in enumerate(solar_zenith_angles):
                    azimuth = 0.0 if k % 2 == 0 else 90.0
                    # The beam travels toward +x (azimuth 0) or +y (90): the up-sun neighbour is at -x or -y.
                    upsun = np.roll(cf, 1, axis=1) if azimuth == 0.0 else np.roll(cf, 1, axis=0)
                    iy, ix = np.mgrid[0:n_host, 0:n_host]
                    rows.append(dict(scene=f"{regime}-{s:03d}", regime=regime, seed=s, zenith=zenith, azimuth=azimuth,
                                     resolution=resolution, ix=ix.ravel(), iy=iy.ravel(), n=n_host, cf=cf.ravel(),
                                     tau=tau.ravel(), upsun=upsun.ravel(), neighbour=neighbour.ravel(),
                                     edge=edge.ravel(), albedo=albedo.ravel()))
    return _assemble(rows, noise, seed, solar_constant)


def _assemble(rows, noise, seed, solar_constant):
    columns = {name: [] for name in ("scene", "regime", "seed", "zenith", "azimuth", "resolution", "ix", "iy", "n")}
    features, truths, icas, ses = [], [], [], []
    noise_rng = np.random.default_rng([seed, 999])
    for row in rows:
        m = row["cf"].size
        for name in columns:
            columns[name].append(np.broadcast_to(np.asarray(row[name], dtype=object if name in ("scene", "regime")
                                                            else None), (m,)))
        mu = np.full(m, np.cos(np.radians(row["zenith"])))
        feats = {"cloud_fraction": row["cf"], "cloud_optical_depth": row["tau"], "cos_solar_zenith": mu,
                 "upsun_cloud_fraction": row["upsun"], "neighbour_cloud_fraction": row["neighbour"],
                 "cloud_edge_distance": row["edge"],
                 "surface_albedo": row["albedo"]}
        truth = true_correction(feats)
        # Close the small remaining energy residual over the domain, as the true 3D correction
        # does, on cloud-affected columns only (weights g) so clear columns far from cloud keep 0.
        weight = np.exp(-row["edge"] / EDGE_SCALE)
        residual = truth["toa_upward_flux"] + truth["atmosphere_absorption"] + \
            (1.0 - row["albedo"]) * truth["surface_downward_flux"]
        truth["toa_upward_flux"] = truth["toa_upward_flux"] - residual.mean() * weight / weight.mean()
        c, tau = row["cf"], row["tau"]
        direct = 0.8 * ((1.0 - c) * np.exp(-0.1 / mu) + c * np.exp(-(tau + 0.1) / mu))
        diffuse = (1.0 - c) * 0.06 + c * (0.7 - 0.4 * np.minimum(tau, 30.0) / 30.0)
        absorption = 0.12 + 0.04 * c
        toa = 1.0 - absorption - (1.0 - row["albedo"]) * (direct + diffuse)
        icas.append(np.column_stack([direct + diffuse, direct, diffuse, toa, absorption]))
        truths.append(np.column_stack([truth[t] for t in TARGETS]))
        features.append(np.column_stack([feats[f] for f in SYNTHETIC_FEATURES]))
        se = np.repeat((noise * (0.5 + c))[:, None], len(TARGETS), axis=1)
        # The direct beam is nearly noise-free where it is weak, so the 3D direct flux stays >= 0.
        se[:, 1] = 2.0 * noise * (direct + truth["surface_downward_direct_flux"])
        se[:, 4] *= 0.25
        ses.append(se)
    cat = {name: np.concatenate(values) for name, values in columns.items()}
    truth, ica, se, X = (np.concatenate(a) for a in (truths, icas, ses, features))
    value = truth + se * noise_rng.normal(size=truth.shape)
    zenith = cat["zenith"].astype(np.float64)
    cf = X[:, list(SYNTHETIC_FEATURES).index("cloud_fraction")]
    ds = xr.Dataset(
        {
            "features": (("sample", "feature"), X, {"units": json.dumps(list(SYNTHETIC_FEATURES.values()))}),
            "target_value": (("sample", "target"), value, {"units": "1"}),
            "target_standard_error": (("sample", "target"), se, {"units": "1"}),
            "independent_column_flux": (("sample", "target"), ica, {"units": "1"}),
            "full_3d_flux": (("sample", "target"), ica + value, {"units": "1"}),
            "baseline_tilted_independent_column": (("sample", "target"), 0.5 * truth, {"units": "1"}),
            "baseline_nonlocal_independent_pixel": (("sample", "target"), 0.8 * truth, {"units": "1"}),
            "noise_free_target": (("sample", "target"), truth, {"units": "1"}),
            "scene": ("sample", cat["scene"].astype(object)),
            "regime": ("sample", cat["regime"].astype(object)),
            "seed": ("sample", cat["seed"].astype(np.int64)),
            "solar_zenith_angle": ("sample", zenith, {"units": "degree"}),
            "solar_beam_azimuth": ("sample", cat["azimuth"].astype(np.float64), {"units": "degree"}),
            "host_resolution": ("sample", cat["resolution"].astype(np.float64), {"units": "m"}),
            "host_ix": ("sample", cat["ix"].astype(np.int64)),
            "host_iy": ("sample", cat["iy"].astype(np.int64)),
            "host_nx": ("sample", cat["n"].astype(np.int64)),
            "host_ny": ("sample", cat["n"].astype(np.int64)),
            "cloud_fraction": ("sample", cf, {"units": "1"}),
            "surface_albedo": ("sample", X[:, list(SYNTHETIC_FEATURES).index("surface_albedo")], {"units": "1"}),
            "incident_flux": ("sample", solar_constant * np.cos(np.radians(zenith)), {"units": "W m-2"}),
        },
        coords={"feature": list(SYNTHETIC_FEATURES), "target": list(TARGETS)},
    )
    recipe = {"features": [{"name": name, "parameters": {}} for name in SYNTHETIC_FEATURES]}
    ds.attrs.update(format_version="1.0", Conventions="CF-1.10", feature_recipe=json.dumps(recipe),
                    archive_fingerprint=hashlib.sha256(f"synthetic-{seed}".encode()).hexdigest(),
                    source="tests/synthetic_pairs.py (test table, not radiative transfer)")
    return ds


#: Layer shares of the independent-column absorption of the synthetic columns (bottom up).
_LAYER_SHARES = np.array([0.25, 0.25, 0.2, 0.15, 0.1, 0.05])


def add_synthetic_layers(ds):
    """A copy of a synthetic pair table with per-layer variables (``docs/pairs-format.md``).

    Six 500 m layers, cloud in the second to fourth with the column's cloud fraction, an
    isothermal hydrostatic pressure profile (scale height 8 km); the layer corrections
    share the column's absorption target among the layers in proportion to their
    independent-column absorption, weighted up by half in the cloudy layers, so they sum
    to it exactly.
    """
    n, L = ds.sizes["sample"], _LAYER_SHARES.size
    edges = np.linspace(0.0, 3000.0, L + 1)
    cf = ds["cloud_fraction"].values
    cloudy = np.zeros((n, L))
    cloudy[:, 1:4] = cf[:, None]
    tau_cloud = ds["features"].sel(feature="cloud_optical_depth").values
    tau = 0.02 + cloudy * tau_cloud[:, None] / 3.0
    mu0 = np.cos(np.radians(ds["solar_zenith_angle"].values))
    above = np.cumsum(tau[:, ::-1], axis=1)[:, ::-1] - 0.5 * tau
    ica = ds["independent_column_flux"].sel(target="atmosphere_absorption").values[:, None] * _LAYER_SHARES
    weight = ica * (1.0 + 0.5 * (cloudy > 0))
    target = ds["target_value"].sel(target="atmosphere_absorption").values[:, None] * weight / weight.sum(
        axis=1, keepdims=True)
    pressure = 101325.0 * np.exp(-edges / 8000.0)
    dp = np.broadcast_to(pressure[:-1] - pressure[1:], (n, L))
    heating = target * ds["incident_flux"].values[:, None] * 9.80665 / 1004.64 * 86400.0 / dp
    layer = ("sample", "host_layer")
    return ds.assign({
        "host_layer_bottom": (layer, np.broadcast_to(edges[:-1], (n, L)).copy(), {"units": "m"}),
        "host_layer_top": (layer, np.broadcast_to(edges[1:], (n, L)).copy(), {"units": "m"}),
        "host_layer_pressure_thickness": (layer, dp.copy(), {"units": "Pa"}),
        "layer_optical_depth": (layer, tau, {"units": "1"}),
        "layer_cloud_fraction": (layer, cloudy, {"units": "1"}),
        "layer_slant_optical_depth_above": (layer, above / mu0[:, None], {"units": "1"}),
        "independent_column_layer_absorption": (layer, ica, {"units": "1"}),
        "full_3d_layer_absorption": (layer, ica + target, {"units": "1"}),
        "layer_absorption_target": (layer, target, {"units": "1"}),
        "layer_heating_rate_target": (layer, heating, {"units": "K day-1"}),
    })
