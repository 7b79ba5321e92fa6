"""Figures of the skill report, drawn with matplotlib and rendered to PNG by Agg.

Every function returns a :class:`matplotlib.figure.Figure` built without pyplot, so no
global backend or figure state is touched; :func:`to_png` renders it with the Agg
canvas.  Fluxes and errors are shown in W m-2, skills
as dimensionless numbers; every predictor keeps its colour in every figure.
"""

import io

import matplotlib
import numpy as np
from matplotlib.figure import Figure

from .predictions import DIRECT_BEAM_PRIOR, NO_CORRECTION

#: Our plain style: light grid, no top/right frame, small type.
STYLE = {
    "font.size": 9, "axes.titlesize": 9.5, "axes.labelsize": 9, "legend.fontsize": 8.5,
    "xtick.labelsize": 8, "ytick.labelsize": 8, "axes.spines.top": False, "axes.spines.right": False,
    "axes.grid": True, "grid.color": "#e3e3e3", "grid.linewidth": 0.6, "axes.axisbelow": True,
    "axes.edgecolor": "#555555", "legend.frameon": False, "figure.facecolor": "white",
    "savefig.facecolor": "white", "image.interpolation": "nearest",
}
WM2 = r"W m$^{-2}$"
TARGET_LABELS = {
    "surface_downward_flux": "surface downward, total",
    "surface_downward_direct_flux": "surface downward, direct",
    "surface_downward_diffuse_flux": "surface downward, diffuse",
    "toa_upward_flux": "TOA upward",
    "atmosphere_absorption": "atmospheric absorption",
}
_FIXED_COLOURS = {NO_CORRECTION: "#8a8a8a", "tilted independent column": "#d98b2b",
                  "non-local independent pixel": "#8c62b8", DIRECT_BEAM_PRIOR: "#d66fa0"}
_MODEL_COLOURS = ("#1d5fa6", "#2a9a5a", "#c23b32", "#1a9bb0", "#9b7b12")


def predictor_colours(names):
    """A fixed colour for every predictor name (references grey/orange/purple/pink, models distinct)."""
    colours, k = {}, 0
    for name in names:
        if name in _FIXED_COLOURS:
            colours[name] = _FIXED_COLOURS[name]
        else:
            colours[name] = _MODEL_COLOURS[k % len(_MODEL_COLOURS)]
            k += 1
    return colours


def to_png(fig, dpi=110):
    """Render a figure to PNG bytes."""
    with matplotlib.rc_context(STYLE):
        buffer = io.BytesIO()
        fig.savefig(buffer, format="png", dpi=dpi)
    return buffer.getvalue()


def _figure(width, height, layout="tight"):
    # The tight layout engine is several times faster than the constrained one here and
    # good enough for regular panel grids.
    with matplotlib.rc_context(STYLE):
        return Figure(figsize=(width, height), layout=layout)


def _panels(fig, n, columns):
    rows = int(np.ceil(n / columns))
    axes = fig.subplots(rows, columns, squeeze=False).ravel()
    return axes


def host_map(pairs, values):
    """A host-grid map (ny, nx) of per-sample values of one domain, NaN where no sample."""
    nx, ny = int(pairs["host_nx"].values[0]), int(pairs["host_ny"].values[0])
    out = np.full((ny, nx), np.nan)
    out[np.asarray(pairs["host_iy"].values, dtype=int), np.asarray(pairs["host_ix"].values, dtype=int)] = values
    return out


def flux_maps(domains, model_name):
    """Maps of surface downward flux: independent column, 3D, corrected, and both errors.

    Parameters
    ----------
    domains : list of dict
        One per row, with keys ``title`` (str), ``resolution`` [m] and host maps (ny, nx)
        [W m-2] ``ica``, ``full_3d``, ``corrected``.
    model_name : str
        Model whose correction is shown.
    """
    titles = ["independent column", "3D benchmark", f"corrected ({model_name})", "corrected minus 3D",
              "independent column minus 3D"]
    # Columns: three flux maps, their colour bar, a gap, two error maps, their colour bar.
    ratios = [1, 1, 1, 0.05, 0.32, 1, 1, 0.05]
    with matplotlib.rc_context(STYLE):
        fig = _figure(14.0, 3.3 * len(domains), layout=None)
        grid = fig.add_gridspec(len(domains), len(ratios), width_ratios=ratios, left=0.04, right=0.95,
                                bottom=0.12 / len(domains), top=1 - 0.2 / len(domains), wspace=0.3, hspace=0.6)
        for r, domain in enumerate(domains):
            maps = [fig.add_subplot(grid[r, c]) for c in (0, 1, 2, 5, 6)]
            bars = [fig.add_subplot(grid[r, 3]), fig.add_subplot(grid[r, 7])]
            ny, nx = domain["ica"].shape
            extent = (0, nx * domain["resolution"] / 1000.0, 0, ny * domain["resolution"] / 1000.0)
            fields = [domain["ica"], domain["full_3d"], domain["corrected"]]
            low = min(np.nanmin(f) for f in fields)
            high = max(np.nanmax(f) for f in fields)
            errors = [domain["corrected"] - domain["full_3d"], domain["ica"] - domain["full_3d"]]
            limit = max(np.nanmax(np.abs(e)) for e in errors) or 1.0
            for k, (ax, field, title) in enumerate(zip(maps, fields + errors, titles)):
                is_error = k >= 3
                image = ax.imshow(field, origin="lower", extent=extent, cmap="RdBu_r" if is_error else "viridis",
                                  vmin=-limit if is_error else low, vmax=limit if is_error else high)
                ax.set_title(title)
                ax.set_xlabel("x [km]")
                ax.set_ylabel("y [km]" if k in (0, 3) else "")
                ax.grid(False)
                if k in (2, 4):
                    bar = fig.colorbar(image, cax=bars[0 if k == 2 else 1])
                    bar.set_label(f"flux error [{WM2}]" if is_error else f"surface downward flux [{WM2}]")
            maps[0].annotate(domain["title"], xy=(0.0, 1.22), xycoords="axes fraction", fontsize=9.5,
                             fontweight="bold", ha="left", va="bottom")
        return fig


def correction_scatter(true, predicted, targets):
    """Predicted against true correction [W m-2], one row per model, one column per target.

    Parameters
    ----------
    true : ndarray (n_sample, n_target) [W m-2]
    predicted : dict of str -> ndarray (n_sample, n_target) [W m-2]
    targets : sequence of str
    """
    colours = predictor_colours(predicted)
    with matplotlib.rc_context(STYLE):
        fig = _figure(2.7 * len(targets), 2.7 * len(predicted) + 0.3)
        axes = fig.subplots(len(predicted), len(targets), squeeze=False)
        for row, (name, values) in zip(axes, predicted.items()):
            for m, (ax, target) in enumerate(zip(row, targets)):
                both = np.concatenate([true[:, m], values[:, m]])
                limit = float(np.quantile(np.abs(both), 0.999)) * 1.05 or 1.0
                ax.plot([-limit, limit], [-limit, limit], color="#555555", lw=0.8, ls="--", label="1:1")
                ax.scatter(true[:, m], values[:, m], s=3, alpha=0.35, color=colours[name], linewidths=0,
                           rasterized=True, label=name)
                ax.set_xlim(-limit, limit)
                ax.set_ylim(-limit, limit)
                ax.set_aspect("equal")
                ax.set_title(TARGET_LABELS.get(target, target))
                ax.set_xlabel(f"true correction [{WM2}]")
                if m == 0:
                    ax.set_ylabel(f"{name}\npredicted correction [{WM2}]")
                    ax.legend(loc="upper left", markerscale=3)
        return fig


def skill_vs_zenith(table, targets, predictors, title):
    """Skill against solar zenith angle, one panel per target, every predictor and the noise floor.

    Parameters
    ----------
    table : pandas.DataFrame
        Rows of breakdown ``"solar_zenith"`` in the headline units (metric table layout).
    targets, predictors : sequence of str
    title : str
    """
    colours = predictor_colours(predictors)
    with matplotlib.rc_context(STYLE):
        fig = _figure(13.0, 6.4)
        axes = _panels(fig, len(targets) + 1, 3)
        for ax, target in zip(axes, targets):
            rows = table[table["target"] == target]
            for name in predictors:
                part = rows[rows["predictor"] == name].sort_values("group_order")
                ax.plot(part["group_value"], part["skill"], marker="o", ms=4,
                        color=colours[name], lw=1.6 if name not in _FIXED_COLOURS else 1.2, label=name)
            floor = rows[rows["predictor"] == predictors[0]].sort_values("group_order")
            ax.plot(floor["group_value"], floor["noise_floor_skill"], color="black",
                    ls=":", lw=1.2, label="noise floor (perfect model)")
            ax.set_title(TARGET_LABELS.get(target, target))
            ax.set_xlabel("solar zenith angle, bin mean [deg]")
            ax.set_ylabel("skill [1]")
            ax.set_xlim(0, 90)
            low = min(-0.1, float(np.nanmin(rows["skill"])) if rows["skill"].notna().any() else -0.1)
            ax.set_ylim(max(low, -1.5) - 0.05, 1.05)
        handles, labels = axes[0].get_legend_handles_labels()
        legend_ax = axes[len(targets)]
        legend_ax.axis("off")
        legend_ax.legend(handles, labels, loc="center",
                         title=f"skill = 1 - RMSE / RMSE(no correction), errors in {WM2}")
        for ax in axes[len(targets) + 1:]:
            ax.axis("off")
        fig.suptitle(title)
        return fig


def error_histograms(errors, targets):
    """Histograms of corrected minus 3D flux [W m-2], one panel per target.

    Parameters
    ----------
    errors : dict of str -> ndarray (n_sample, n_target) [W m-2]
    targets : sequence of str
    """
    colours = predictor_colours(errors)
    with matplotlib.rc_context(STYLE):
        fig = _figure(13.0, 6.4)
        axes = _panels(fig, len(targets) + 1, 3)
        for m, (ax, target) in enumerate(zip(axes, targets)):
            limit = max(float(np.quantile(np.abs(e[:, m]), 0.995)) for e in errors.values()) * 1.05 or 1.0
            bins = np.linspace(-limit, limit, 61)
            for name, e in errors.items():
                ax.hist(np.clip(e[:, m], -limit, limit), bins=bins, histtype="step", lw=1.3, color=colours[name],
                        label=name)
            ax.set_yscale("log")
            ax.set_title(TARGET_LABELS.get(target, target))
            ax.set_xlabel(f"corrected minus 3D flux [{WM2}]")
            ax.set_ylabel("samples")
        handles, labels = axes[0].get_legend_handles_labels()
        axes[len(targets)].axis("off")
        axes[len(targets)].legend(handles, labels, loc="center", title="values beyond the axis are\n"
                                                                       "counted in the outermost bins")
        for ax in axes[len(targets) + 1:]:
            ax.axis("off")
        return fig


def importance_bars(tables, top=20):
    """Permutation importance per model: horizontal bars with standard errors over scenes.

    Parameters
    ----------
    tables : dict of str -> pandas.DataFrame
        Model name -> output of :func:`~surrogate3d.evaluation.importance.permutation_importance`
        (sorted, most important first).
    top : int
        Features shown per model (all are in ``importance.csv``).
    """
    colours = predictor_colours(tables)
    shown = {name: table.head(top) for name, table in tables.items()}
    n_feature = max(len(t) for t in shown.values())
    longest = max(len(str(f)) for t in shown.values() for f in t["feature"])
    with matplotlib.rc_context(STYLE):
        fig = _figure((0.065 * longest + 3.6) * len(tables), 0.3 * n_feature + 1.5)
        axes = fig.subplots(1, len(tables), squeeze=False).ravel()
        for ax, (name, table) in zip(axes, shown.items()):
            table = table.iloc[::-1]
            ax.barh(table["feature"], table["importance"], xerr=table["importance_se"].fillna(0.0),
                    color=colours[name], alpha=0.85, error_kw={"lw": 0.8, "capsize": 2})
            ax.axvline(0.0, color="#555555", lw=0.8)
            total = len(tables[name])
            ax.set_title(name if total <= top else f"{name} (top {top} of {total} features)")
            ax.set_xlabel("skill lost when the feature is shuffled [1]")
            ax.set_ylim(-0.6, len(table) - 0.4)
            ax.grid(axis="y", visible=False)
        return fig


def learning_curve_plot(curve, model_name, full_skill=None):
    """Held-out skill against the number of training scenes.

    Parameters
    ----------
    curve : pandas.DataFrame
        Output of :func:`~surrogate3d.evaluation.learning_curve.learning_curve`.
    model_name : str
    full_skill : float, optional
        Target-averaged skill of the trained model itself, marked for comparison.
    """
    with matplotlib.rc_context(STYLE):
        fig = _figure(8.4, 3.8)
        ax = fig.subplots()
        palette = ("#1d5fa6", "#2a9a5a", "#c23b32", "#1a9bb0", "#9b7b12")
        targets = [t for t in curve["target"].unique() if t != "mean"]
        for k, target in enumerate(targets):
            part = curve[curve["target"] == target]
            ax.plot(part["n_training_scenes"], part["skill"], marker="o", ms=3, lw=1.0,
                    color=palette[k % len(palette)], label=TARGET_LABELS.get(target, target))
        mean = curve[curve["target"] == "mean"]
        ax.plot(mean["n_training_scenes"], mean["skill"], marker="o", color="black", lw=2.2, label="mean of targets")
        if full_skill is not None:
            ax.axhline(full_skill, color="black", ls=":", lw=1.0, label=f"{model_name} as trained (mean)")
        ax.set_xlabel("training scenes")
        ax.set_ylabel("held-out skill [1]")
        ax.set_title(f"{model_name} refitted on growing subsets of the training scenes")
        ax.xaxis.get_major_locator().set_params(integer=True)
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0))
        return fig


def group_skill_bars(table, groups, predictors, title, xlabel):
    """Skill of every predictor in each group (e.g. each left-out family) for one target, with the noise floor.

    Parameters
    ----------
    table : pandas.DataFrame
        Rows of one breakdown and one target in the headline units, ``group`` naming the group.
    groups, predictors : sequence of str
    title, xlabel : str
    """
    colours = predictor_colours(predictors)
    width = 0.8 / len(predictors)
    with matplotlib.rc_context(STYLE):
        fig = _figure(max(6.0, 1.4 * len(groups) + 3.0), 3.9)
        ax = fig.subplots()
        x = np.arange(len(groups))
        low = max(min(float(np.nanmin(table["skill"])) if table["skill"].notna().any() else 0.0, -0.1), -1.5) - 0.05
        for k, name in enumerate(predictors):
            part = table[table["predictor"] == name].set_index("group").reindex(groups)
            centres = x - 0.4 + (k + 0.5) * width
            ax.bar(centres, part["skill"], width=width * 0.95, color=colours[name], label=name)
            for centre, value in zip(centres, part["skill"]):
                if value < low:             # a bar cut by the axis: its value at the foot
                    ax.text(centre, low, f"{value:.1f}", rotation=90, ha="center", va="bottom", fontsize=7)
        floor = table[table["predictor"] == predictors[0]].set_index("group").reindex(groups)
        for xi, value in zip(x, floor["noise_floor_skill"]):
            ax.plot([xi - 0.42, xi + 0.42], [value, value], color="black", ls=":", lw=1.2)
        ax.plot([], [], color="black", ls=":", lw=1.2, label="noise floor (perfect model)")
        ax.axhline(0.0, color="#555555", lw=0.8)
        ax.set_xticks(x, [g.replace("_", " ") for g in groups], rotation=15)
        ax.set_xlabel(xlabel)
        ax.set_ylabel("skill [1]")
        ax.set_ylim(low, 1.05)
        ax.set_title(title)
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0))
        return fig


def skill_bars(table, targets, predictors, title):
    """Overall skill of every predictor per target, with the noise floor marked.

    Parameters
    ----------
    table : pandas.DataFrame
        Rows of breakdown ``"all"`` in the headline units.
    targets, predictors : sequence of str
    title : str
    """
    colours = predictor_colours(predictors)
    width = 0.8 / len(predictors)
    with matplotlib.rc_context(STYLE):
        fig = _figure(11.0, 3.9)
        ax = fig.subplots()
        x = np.arange(len(targets))
        for k, name in enumerate(predictors):
            part = table[table["predictor"] == name].set_index("target").reindex(targets)
            ax.bar(x - 0.4 + (k + 0.5) * width, part["skill"], width=width * 0.95, color=colours[name], label=name)
        floor = table[table["predictor"] == predictors[0]].set_index("target").reindex(targets)
        for xi, value in zip(x, floor["noise_floor_skill"]):
            ax.plot([xi - 0.42, xi + 0.42], [value, value], color="black", ls=":", lw=1.2)
        ax.plot([], [], color="black", ls=":", lw=1.2, label="noise floor (perfect model)")
        ax.axhline(0.0, color="#555555", lw=0.8)
        ax.set_xticks(x, [TARGET_LABELS.get(t, t) for t in targets])
        ax.set_ylabel("skill [1]")
        ax.set_title(title)
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0))
        return fig


def profile_panels(mean_profiles, by_height, model_name, longwave=False):
    """Domain-mean absorption profiles of sample scenes and their 3D change, and RMSE by height.

    Top row: 3D, independent-column and corrected absorption per km of every layer; bottom
    row: 3D minus independent column, and the model's change; right: RMSE in the cloudy
    columns by height above the cloud top (heating rate, and layer absorption in W m-2).

    Parameters
    ----------
    mean_profiles : list of dict
        :attr:`surrogate3d.evaluation.profile_skill.ProfileEvaluation.mean_profiles`.
    by_height : pandas.DataFrame
        :attr:`~surrogate3d.evaluation.profile_skill.ProfileEvaluation.by_height`.
    model_name : str
    longwave : bool
        The longwave page's figure (:mod:`surrogate3d.evaluation.longwave_profile_skill`):
        net absorption, scenes without a sun, and a panel without rows (no profile, or no
        heating rate without air pressure) left empty, without bars or legend.

    Returns
    -------
    matplotlib.figure.Figure
    """
    absorbed, absorption = ("net absorbed", "net absorption") if longwave else ("absorbed", "absorption")
    with matplotlib.rc_context(STYLE):
        n = max(len(mean_profiles), 1) if longwave else len(mean_profiles)
        fig = _figure(2.7 * n + 4.2, 7.2)
        grid = fig.add_gridspec(2, n + 1, width_ratios=[1.0] * n + [1.5])
        model_colour, ica_colour = _MODEL_COLOURS[2], _FIXED_COLOURS[NO_CORRECTION]
        for j, profile in enumerate(mean_profiles):
            # Per km of height, so that layers of different thickness compare.
            per_km = 1000.0 / profile["thickness"]
            height = profile["height"] / 1000.0
            top, bottom = fig.add_subplot(grid[0, j]), fig.add_subplot(grid[1, j])
            top.plot(profile["full_3d"] * per_km, height, color="black", lw=1.8, label="3D")
            top.plot(profile["independent_column"] * per_km, height, color=ica_colour, lw=1.4,
                     label="independent column")
            top.plot(profile["corrected"] * per_km, height, color=model_colour, lw=1.4, ls="--",
                     label=f"corrected ({model_name})")
            sun = "" if longwave else f", sun {profile['solar_zenith_angle']:g} deg"
            top.set_title(f"{profile['scene']}{sun}", fontsize=8)
            top.set_xlabel(f"{absorbed} [W m-2 km-1]")
            bottom.axvline(0.0, color="0.75", lw=0.8)
            bottom.plot((profile["full_3d"] - profile["independent_column"]) * per_km, height, color="black", lw=1.8,
                        label="3D minus independent column")
            bottom.plot((profile["corrected"] - profile["independent_column"]) * per_km, height, color=model_colour,
                        lw=1.4, ls="--", label=model_name)
            bottom.set_xlabel("3D change [W m-2 km-1]")
            for ax in (top, bottom):
                ax.set_ylabel("height [km]" if j == 0 else "")
            if j == 0:
                top.legend(loc="upper right", fontsize=7)
                bottom.legend(loc="upper right", fontsize=7)
        for row, units in enumerate(("K day-1", "W m-2")):
            ax = fig.add_subplot(grid[row, n])
            part = by_height[by_height["units"] == units] if len(by_height) else by_height
            labels = list(part["height_above_cloud_top"]) if len(part) else []
            y = np.arange(len(labels))
            # The shortwave figure keeps the legend of an empty heating-rate panel: it names the
            # bars of the panel below too.
            bars = bool(labels) or not longwave
            if bars:
                ax.barh(y - 0.2, part["rmse_no_correction"], height=0.4, color=ica_colour, label=NO_CORRECTION)
                ax.barh(y + 0.2, part["rmse_model"], height=0.4, color=model_colour, label=model_name)
                ax.set_yticks(y, labels, fontsize=7)
            ax.set_xlabel(f"RMSE [{units}]")
            ax.set_title(("heating rate" if row == 0 else f"layer {absorption}") + ", cloudy columns", fontsize=8)
            if row == 0:
                ax.set_ylabel("height above cloud top")
                if bars:
                    ax.legend(loc="upper right", fontsize=7)
        return fig
