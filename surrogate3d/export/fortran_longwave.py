"""The longwave host features and the one-call host interface of a longwave model, in generated Fortran.

The longwave twin of :mod:`surrogate3d.export.fortran_features` and
:mod:`surrogate3d.export.fortran_host`: for a longwave column model ``NAME`` (a recipe of
:data:`surrogate3d.pairs.longwave_features.LONGWAVE_FEATURES`),
:func:`longwave_features_module_text` writes module ``NAME_features``, the Fortran twin of
:func:`surrogate3d.pairs.longwave_features.longwave_host_features` on a periodic domain
and on a sub-domain with a halo, and :func:`longwave_host_module_text` writes module
``NAME_host`` on top of it and of ``NAME_correction``.

Public interface (``docs/host-model-guide.md``, "Longwave corrections"):

``NAME_n_host_features``, ``NAME_column_names``
    Number and names of the feature columns, in the model's column order.
``NAME_halo_needed(dx, dy, hx_needed, hy_needed)``
    Pure: the halo (columns along x and y) the features read: the widest neighbour
    window, ``ceiling(radius / dx - 1e-9)``; 0 without windows.
``NAME_host_features(nx, ny, nz, hx, hy, dx, dy, z_edge, layer_cloud_fraction, layer_air_temperature, ...)``
    The features of the ``nx x ny`` own columns from fields dimensioned
    ``(1-hx:nx+hx, 1-hy:ny+hy[, nz])`` (layer 1 the lowest; numpy's ``(nz, ny, nx)``
    arrays are the same memory): the layer cloud fraction [1] and air temperature [K],
    the total cloud fraction [1], the cloud-edge length per area [m-1], the liquid water
    path [g m-2], the surface temperature [K] and longwave emissivity [1],
    ``clear_sky_fluxes(..., 2)`` (the host's clear-sky surface downward and top-of-domain
    upward longwave fluxes [W m-2]) and ``longwave_fluxes(..., 5)`` (its own
    independent-column longwave fields [W m-2] in the order of
    :data:`~surrogate3d.pairs.longwave_features.LONGWAVE_TARGETS`).
    ``features(j, ix + (iy - 1) nx)`` is column ``j`` of own column ``(ix, iy)``.
``NAME_correct_host(model, <the same fields>, fluxes, corrections, outside, n_outside, status, message)``
    Features, correction and envelope flag in one call: ``corrections(m, i)`` is the
    model's correction of target ``m`` [W m-2] and ``fluxes(m, i)`` the host's own field
    plus it, ready to use.  A longwave model has no clear-sky gate and no consistency step
    (clear columns beside clouds gain flux from the cloud sides; the targets are not tied
    by one budget the model could close), so every column is independent and a
    decomposed host needs no reduction.

As in the shortwave module the block of own columns plus halo is treated as periodic;
with a halo at least ``NAME_halo_needed`` wide no window of an own column wraps, so a
sub-domain gives the whole domain's features bit for bit (the window sums run over the
window's columns in order).  Status codes (``features`` is NaN unless 0; ``message``
names the field and the index): 1 a halo narrower than the windows read; 2 a non-finite
value in a field the recipe reads (own columns and halo), in ``dx``, ``dy`` or
``z_edge``; 3 a value outside its allowed range
(:data:`surrogate3d.pairs.longwave_features.LONGWAVE_FIELD_RANGES`), ``dx`` or ``dy`` not
positive, ``z_edge`` not strictly increasing, or a dimension below 1 (a halo below 0).
The arithmetic repeats numpy's operation by operation (the window sums too: both add the
window's terms in order), so every feature but the three effective-cloud-fraction priors
equals numpy's bit for bit; the priors use Goldberg's ``ln(1 + x)`` and the compiler's
``exp`` and agree to rounding (``tests/export/test_fortran_longwave.py``).  This holds for
gfortran on x86-64 at ``-O2``; where the compiler fuses multiply-adds (e.g. aarch64, or
``-march=native``), add ``-ffp-contract=off`` to keep it.  The procedures are ``pure`` (OpenMP-safe)
and use the intrinsic modules only.
"""

import numpy as np

from ..baselines.effective_cloud_fraction import _MU, _MU_WEIGHTS, STAIRCASE_FACTOR
from ..errors import ValidationError
from ..pairs import features as library
from ..pairs.longwave_features import LONGWAVE_FEATURES, LONGWAVE_TARGETS, NEIGHBOUR_RADII
from .fortran_features import (_HELPERS, _LINE_LIMIT, _check_prefix, _checked_column_names, _fit, _names_parameter,
                               _real, _text, _with_dependencies)

#: Window column name -> radius [m].
_WINDOWS = {library.column_name("neighbour_mean_cloud_fraction", r): float(r) for r in NEIGHBOUR_RADII}

#: The effective-cloud-fraction priors: feature -> (host flux slot, clear-sky slot) of its fluxes.
_PRIORS = {"effective_cloud_fraction_prior": (LONGWAVE_TARGETS.index("longwave_surface_downward_flux") + 1, 1),
           "effective_cloud_fraction_toa_prior": (LONGWAVE_TARGETS.index("longwave_toa_upward_flux") + 1, 2)}

#: Layer and plane arguments: name -> (low, high, interval text, low open) of their allowed values.
_LAYER_ARGUMENTS = {"layer_cloud_fraction": ("0.0_real64", "1.0_real64", "[0, 1]", False),
                    "layer_air_temperature": ("0.0_real64", "huge(1.0_real64)", "(0, inf)", True)}
_PLANE_ARGUMENTS = {"total_cloud_fraction": ("0.0_real64", "1.0_real64", "[0, 1]", False),
                    "cloud_edge_length": ("0.0_real64", "huge(1.0_real64)", "[0, inf)", False),
                    "liquid_water_path": ("0.0_real64", "huge(1.0_real64)", "[0, inf)", False),
                    "surface_temperature": ("0.0_real64", "huge(1.0_real64)", "(0, inf)", True),
                    "surface_longwave_emissivity": ("0.0_real64", "1.0_real64", "[0, 1]", False)}
#: Planes of the stacked flux arguments: (argument, slot, field name, low bound or None).
_FLUX_PLANES = ([("clear_sky_fluxes", 1, "longwave_clear_sky_surface_downward_flux", "0.0_real64"),
                 ("clear_sky_fluxes", 2, "longwave_clear_sky_toa_upward_flux", "0.0_real64")]
                + [("longwave_fluxes", k, flux, None if "net_absorption" in flux else "0.0_real64")
                   for k, flux in enumerate(LONGWAVE_TARGETS, start=1)])

#: The fields (argument names, or (argument, slot) for a flux plane) each feature reads.
_READS = {
    "cloud_fraction": {"total_cloud_fraction"},
    "cloud_base_height": {"layer_cloud_fraction"},
    "cloud_top_height": {"layer_cloud_fraction"},
    "cloud_base_air_temperature": {"layer_cloud_fraction", "layer_air_temperature"},
    "cloud_top_air_temperature": {"layer_cloud_fraction", "layer_air_temperature"},
    "cloud_side_area_per_area": {"layer_cloud_fraction", "cloud_edge_length"},
    **{name: {"total_cloud_fraction"} for name in _WINDOWS},
    "liquid_water_path": {"liquid_water_path"},
    **{f"host_{flux}": {("longwave_fluxes", k)} for k, flux in enumerate(LONGWAVE_TARGETS, start=1)},
    "surface_temperature": {"surface_temperature"},
    "surface_longwave_emissivity": {"surface_longwave_emissivity"},
    "host_longwave_clear_sky_surface_downward_flux": {("clear_sky_fluxes", 1)},
    "host_longwave_clear_sky_toa_upward_flux": {("clear_sky_fluxes", 2)},
    **{name: {"total_cloud_fraction", "cloud_edge_length", "layer_cloud_fraction", ("longwave_fluxes", host),
              ("clear_sky_fluxes", clear)} for name, (host, clear) in _PRIORS.items()},
}
_READS["effective_cloud_fraction_atmosphere_prior"] = (_READS["effective_cloud_fraction_prior"]
                                                       | _READS["effective_cloud_fraction_toa_prior"]
                                                       | {"surface_longwave_emissivity"})

#: The host-field arguments of NAME_host_features after the grid (and of NAME_correct_host after the model).
FIELD_ARGUMENTS = ("nx, ny, nz, hx, hy, dx, dy, z_edge, layer_cloud_fraction, layer_air_temperature, "
                   "total_cloud_fraction, cloud_edge_length, liquid_water_path, surface_temperature, "
                   "surface_longwave_emissivity, clear_sky_fluxes, longwave_fluxes")

_DECLARATIONS = f"""\
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: dx, dy, z_edge(nz + 1)
    real(real64), intent(in), dimension(1-hx:nx+hx, 1-hy:ny+hy, nz) :: layer_cloud_fraction, layer_air_temperature
    real(real64), intent(in), dimension(1-hx:nx+hx, 1-hy:ny+hy) :: total_cloud_fraction, cloud_edge_length, &
        liquid_water_path, surface_temperature, surface_longwave_emissivity
    real(real64), intent(in) :: clear_sky_fluxes(1-hx:nx+hx, 1-hy:ny+hy, 2)
    real(real64), intent(in) :: longwave_fluxes(1-hx:nx+hx, 1-hy:ny+hy, {len(LONGWAVE_TARGETS)})"""

_HEADER = """\
! Generated by surrogate3d export: the longwave host features of model {p} (feature recipe
! "{recipe}"), the Fortran twin of surrogate3d.pairs.longwave_features.longwave_host_features;
! docs/host-model-guide.md, "Longwave corrections".
!
! {p}_halo_needed: the halo the neighbour windows read.
! {p}_host_features: the features of the nx x ny own columns from fields dimensioned
! (1-hx:nx+hx, 1-hy:ny+hy[, nz]), layer 1 the lowest, treating the block of own columns and
! halo as periodic (a host fills the halo of a periodic domain by periodic copy).
! clear_sky_fluxes(:, :, 1:2): clear-sky surface downward, top-of-domain upward [W m-2];
! longwave_fluxes(:, :, 1:5): the host's own independent-column longwave fields [W m-2]:
! {targets}.
! features(j, ix + (iy - 1) * nx) is feature column j of own column (ix, iy), columns in the
! order of {p}_column_names.
!
! status of {p}_host_features (features is NaN unless 0; message says what and where):
!   0  success
!   1  halo narrower than the neighbour windows read
!   2  a non-finite value in a field the recipe reads, in dx, dy or in z_edge (field and index)
!   3  a value outside its allowed range, dx or dy not positive, z_edge not strictly
!      increasing, or nx, ny, nz < 1 or hx, hy < 0
! Fields the recipe does not read are neither read nor checked.
module {p}_features
  use, intrinsic :: iso_fortran_env, only: real64
  use, intrinsic :: ieee_arithmetic, only: ieee_is_finite, ieee_value, ieee_quiet_nan
  implicit none
  private
  public :: {p}_n_host_features, {p}_column_names, {p}_halo_needed, {p}_host_features

  integer, parameter :: {p}_n_host_features = {n}
{names}
{constants}
contains
"""

#: Procedures of this module: name -> (Fortran text with ``{p}`` for the prefix, helpers it calls).
_LONGWAVE_HELPERS = {
    "air_temperature_at": ("""\
  ! Air temperature [K] at height [m] of one column, linear in height between layer centres and
  ! extended beyond the lowest and highest centre; one layer gives its own temperature
  ! (surrogate3d.pairs.longwave_features.air_temperature_at).
  pure function {p}_air_temperature_at(nz, z_edge, temperature, height) result(air)
    integer, intent(in) :: nz
    real(real64), intent(in) :: z_edge(nz + 1), temperature(nz), height
    real(real64) :: air, lower_centre, upper_centre
    integer :: k, below
    if (nz == 1) then
      air = temperature(1)
      return
    end if
    ! numpy's searchsorted: the centres below height, less one, kept within 1 .. nz - 1.
    below = 0
    do k = 1, nz
      if (0.5_real64 * (z_edge(k + 1) + z_edge(k)) < height) below = below + 1
    end do
    k = min(max(below, 1), nz - 1)
    lower_centre = 0.5_real64 * (z_edge(k + 1) + z_edge(k))
    upper_centre = 0.5_real64 * (z_edge(k + 2) + z_edge(k + 1))
    air = temperature(k) + (height - lower_centre) / (upper_centre - lower_centre) * (temperature(k + 1) - temperature(k))
  end function {p}_air_temperature_at
""", ()),
    "effective_change": ("""\
  ! (N_e - N) (F - F_clear) / N [W m-2]: the effective-cloud-fraction change of a flux of random
  ! cylinders of the column's cover N, edge length per area and depth (Killen and Ellingson 1994;
  ! surrogate3d.pairs.longwave_features.effective_cloud_fraction_prior); 0 in clear and overcast
  ! columns and where the cylinders' diameter is not finite.
  elemental function {p}_effective_change(cover, edge_length, depth, host, clear) result(change)
    real(real64), intent(in) :: cover, edge_length, depth, host, clear
    real(real64) :: change, contrast, edge, diameter, beta, scaled, log_clear, terms(32), partial(8)
    integer :: k
    change = 0.0_real64
    if (.not. (cover > 0.0_real64 .and. cover < 1.0_real64)) return
    contrast = (host - clear) / cover
    edge = edge_length / {p}_staircase
    if (.not. (edge > 0.0_real64)) return
    diameter = 4.0_real64 * (1.0_real64 - cover) * (-{p}_log1p(-cover)) / edge
    if (.not. ieee_is_finite(diameter)) return
    beta = max(depth / diameter, 0.0_real64)
    ! Flat clouds: N_e = N exactly (as in numpy), no rounding of the quadrature.
    if (.not. (beta > 0.0_real64)) return
    log_clear = {p}_log1p(-cover)
    scaled = {p}_four_over_pi * beta
    do k = 1, 32
      terms(k) = exp((1.0_real64 + scaled * {p}_tan(k)) * log_clear)
      terms(k) = terms(k) * {p}_mu(k) * {p}_mu_weight(k)
    end do
    ! numpy's pairwise sum of 32 terms: eight running sums, then added in pairs.
    partial = terms(1:8)
    do k = 9, 32, 8
      partial = partial + terms(k:k + 7)
    end do
    change = (1.0_real64 - 2.0_real64 * (((partial(1) + partial(2)) + (partial(3) + partial(4))) &
        + ((partial(5) + partial(6)) + (partial(7) + partial(8)))) - cover) * contrast
  end function {p}_effective_change
""", ("log1p",)),
    "check_flux": ("""\
  ! Status 2 at the first non-finite value of plane slot of a stacked flux argument (own columns
  ! and halo), else 3 at the first below low (when bounded); the field is named.
  pure subroutine {p}_check_flux(argument, slot, field, values, nx, ny, hx, hy, bounded, low, status, message)
    character(len=*), intent(in) :: argument, field
    integer, intent(in) :: slot, nx, ny, hx, hy
    real(real64), intent(in) :: values(1-hx:nx+hx, 1-hy:ny+hy), low
    logical, intent(in) :: bounded
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    real(real64) :: floor
    floor = merge(low, -huge(1.0_real64), bounded)
    call {p}_check_plane(argument, slot, field, values, nx, ny, hx, hy, floor, huge(1.0_real64), .false., &
        merge('[0, inf)   ', '(-inf, inf)', bounded), status, message)
  end subroutine {p}_check_flux
""", ("check_plane",)),
}


#: Every procedure a longwave features module may use: the shared ones, then its own.
_ALL_HELPERS = {**_HELPERS, **_LONGWAVE_HELPERS}


def _columns(column_names):
    return _checked_column_names(column_names, LONGWAVE_FEATURES, "which are no longwave features; known")


def _reals(name, values):
    """A real64 parameter array of exact literals, four per line."""
    items = [_real(v) for v in values]
    rows = ", &\n".join("      " + ", ".join(items[i:i + 4]) for i in range(0, len(items), 4))
    return f"  real(real64), parameter :: {name}({len(items)}) = [ &\n{rows}]"


def _constants(prefix, columns):
    if not set(columns) & {*_PRIORS, "effective_cloud_fraction_atmosphere_prior"}:
        return ""
    # The nodes of surrogate3d.baselines.effective_cloud_fraction, and tan(theta) as numpy computes it.
    tan = np.sqrt(1.0 - _MU**2) / _MU
    return "\n".join([
        "  ! Gauss-Legendre nodes mu and weights of the hemispheric integral, tan(theta) at the nodes, 4 / pi.",
        _reals(f"{prefix}_mu", _MU), _reals(f"{prefix}_mu_weight", _MU_WEIGHTS), _reals(f"{prefix}_tan", tan),
        f"  real(real64), parameter :: {prefix}_four_over_pi = {_real(4.0 / np.pi)}",
        f"  real(real64), parameter :: {prefix}_staircase = {_real(STAIRCASE_FACTOR)}", ""])


def _reads(columns):
    reads = set()
    for name in columns:
        reads |= _READS[name]
    return reads


def _checks(prefix, reads):
    """Declarations saying which fields are read, and the calls checking them in argument order (the first bad
    value is reported; every argument is referenced, the unread ones behind a false constant)."""
    flags, calls = [], []

    def flag(name, read):
        flags.append(f"    logical, parameter :: reads_{name} = {'.true.' if read else '.false.'}")

    for name, (low, high, interval, low_open) in _LAYER_ARGUMENTS.items():
        flag(name, name in reads)
        calls += [f"    if (reads_{name}) then",
                  f"      call {prefix}_check_layers('{name}', {name}, nx, ny, nz, hx, hy, "
                  f"{low}, {high}, {'.true.' if low_open else '.false.'}, '{interval}', status, message)", "    end if"]
    for name, (low, high, interval, low_open) in _PLANE_ARGUMENTS.items():
        flag(name, name in reads)
        calls += [f"    if (reads_{name}) then",
                  f"      call {prefix}_check_plane('{name}', 0, '', {name}, nx, ny, hx, hy, "
                  f"{low}, {high}, {'.true.' if low_open else '.false.'}, '{interval}', status, message)", "    end if"]
    for argument, slot, field, low in _FLUX_PLANES:
        flag(f"{argument}_{slot}", (argument, slot) in reads)
        calls += [f"    if (reads_{argument}_{slot}) then",
                  f"      call {prefix}_check_flux('{argument}', {slot}, '{field}', "
                  f"{argument}(:, :, {slot}), nx, ny, hx, hy, {'.true.' if low else '.false.'}, "
                  f"{low or '0.0_real64'}, status, message)", "    end if"]
    return flags, calls


def _expression(prefix, name, windows):
    """The Fortran expression of feature column ``name`` of own column (ix, iy)."""
    p = prefix
    expressions = {
        "cloud_fraction": "total_cloud_fraction(ix, iy)", "cloud_base_height": "base(ix, iy)",
        "cloud_top_height": "top(ix, iy)", "liquid_water_path": "liquid_water_path(ix, iy)",
        "surface_temperature": "surface_temperature(ix, iy)",
        "surface_longwave_emissivity": "surface_longwave_emissivity(ix, iy)",
        "host_longwave_clear_sky_surface_downward_flux": "clear_sky_fluxes(ix, iy, 1)",
        "host_longwave_clear_sky_toa_upward_flux": "clear_sky_fluxes(ix, iy, 2)",
        "cloud_side_area_per_area": "cloud_edge_length(ix, iy) * depth",
        **{f"host_{flux}": f"longwave_fluxes(ix, iy, {k})" for k, flux in enumerate(LONGWAVE_TARGETS, start=1)},
        **{column: f"windows(ix, iy, {windows[radius]})" for column, radius in _WINDOWS.items() if radius in windows},
        "cloud_base_air_temperature": f"{p}_air_temperature_at(nz, z_edge, temperature, base(ix, iy))",
        "cloud_top_air_temperature": f"{p}_air_temperature_at(nz, z_edge, temperature, top(ix, iy))",
        "effective_cloud_fraction_prior": "surface_prior", "effective_cloud_fraction_toa_prior": "toa_prior",
        "effective_cloud_fraction_atmosphere_prior": "-(toa_prior + surface_longwave_emissivity(ix, iy) * surface_prior)",
    }
    return expressions[name]


def longwave_features_module_text(prefix, recipe, column_names):
    """Fortran 2008 source of module ``NAME_features`` for a longwave model.

    Parameters
    ----------
    prefix : str
        The model's Fortran name (lower case letters, digits and ``_``, starting with a
        letter, at most 40 characters).
    recipe : surrogate3d.pairs.longwave_features.LongwaveFeatureRecipe
        The model's recipe (its name heads the module).
    column_names : sequence of str
        The model's feature columns in order (names of
        :data:`~surrogate3d.pairs.longwave_features.LONGWAVE_FEATURES`).

    Returns
    -------
    str
        See the module docstring for the interface and status codes.

    Raises
    ------
    surrogate3d.errors.ValidationError
        A prefix that is no Fortran name, no columns, an unknown column or one listed twice.

    Examples
    --------
    >>> from surrogate3d.pairs.longwave_features import LongwaveFeatureRecipe
    >>> text = longwave_features_module_text("lw", LongwaveFeatureRecipe(), ["cloud_fraction", "cloud_base_height"])
    >>> "integer, parameter :: lw_n_host_features = 2" in text
    True
    """
    _check_prefix(prefix)
    columns = _columns(column_names)
    p = prefix
    flags, checks = _checks(p, _reads(columns))
    radii = sorted({_WINDOWS[name] for name in columns if name in _WINDOWS})
    windows = {radius: w for w, radius in enumerate(radii, start=1)}
    helpers = {"check_layers", "check_plane", "check_flux"}
    extent = any(name in columns for name in ("cloud_base_height", "cloud_top_height", "cloud_base_air_temperature",
                                              "cloud_top_air_temperature", "cloud_side_area_per_area",
                                              *_PRIORS, "effective_cloud_fraction_atmosphere_prior"))
    temperature = any(name in columns for name in ("cloud_base_air_temperature", "cloud_top_air_temperature"))
    surface_prior = any(n in columns for n in ("effective_cloud_fraction_prior",
                                               "effective_cloud_fraction_atmosphere_prior"))
    toa_prior = any(n in columns for n in ("effective_cloud_fraction_toa_prior",
                                           "effective_cloud_fraction_atmosphere_prior"))
    if extent:
        helpers.add("cloud_extent")
    if temperature:
        helpers.add("air_temperature_at")
    if windows:
        helpers.update({"window_mean", "cells"})
    if surface_prior or toa_prior:
        helpers.add("effective_change")
    declarations, derived = [], []
    if extent:
        declarations.append("    real(real64), allocatable :: top(:, :), base(:, :)")
        derived += ["    allocate (top(1-hx:nx+hx, 1-hy:ny+hy), base(1-hx:nx+hx, 1-hy:ny+hy))",
                    f"    call {p}_cloud_extent(layer_cloud_fraction, z_edge, nx, ny, nz, hx, hy, 0.0_real64, top, base)"]
    if windows:
        declarations.append("    real(real64), allocatable :: windows(:, :, :)")
        derived.append(f"    allocate (windows(nx, ny, {len(windows)}))")
        derived += [f"    call {p}_window_mean(total_cloud_fraction, nx, ny, hx, hy, {_real(r)}, dx, dy, "
                    f"windows(:, :, {w}))" for r, w in windows.items()]
    if temperature:
        declarations.append("    real(real64) :: temperature(nz)")
    declarations += [f"    real(real64) :: {name}" for flag, name in ((surface_prior, "surface_prior"),
                                                                (toa_prior, "toa_prior")) if flag]
    if extent:
        declarations.append("    real(real64) :: depth")
    per_column = []
    if temperature:
        per_column.append("        temperature = layer_air_temperature(ix, iy, :)")
    if extent:
        per_column.append("        depth = top(ix, iy) - base(ix, iy)")
    for flag, variable, name in ((surface_prior, "surface_prior", "effective_cloud_fraction_prior"),
                                 (toa_prior, "toa_prior", "effective_cloud_fraction_toa_prior")):
        if flag:
            host, clear = _PRIORS[name]
            per_column.append(f"        {variable} = {p}_effective_change(total_cloud_fraction(ix, iy), "
                              f"cloud_edge_length(ix, iy), depth, &\n            longwave_fluxes(ix, iy, {host}), "
                              f"clear_sky_fluxes(ix, iy, {clear}))")
    for j, name in enumerate(columns, start=1):
        per_column += [f"        ! {name}", f"        features({j}, i) = {_expression(p, name, windows)}"]
    halo = ([f"    hx_needed = max(hx_needed, {p}_cells({_real(r)}, dx))" for r in radii]
            + [f"    hy_needed = max(hy_needed, {p}_cells({_real(r)}, dy))" for r in radii]
            or ["    ! No feature reads beyond its column: no halo at any column size (dx, dy referenced for the",
                "    ! interface's sake).", "    if (.not. (dx > 0.0_real64 .and. dy > 0.0_real64)) return"])
    widest = next((name for name in columns if name in _WINDOWS and _WINDOWS[name] == radii[-1]), None) \
        if radii else None
    body = [_HEADER.format(p=p, recipe=" ".join(str(recipe.name).split())[:60], n=len(columns),
                           targets=", ".join(t.removeprefix("longwave_").replace("_flux", "").replace("net_absorption", "net")
                                           for t in LONGWAVE_TARGETS),
                           names=_names_parameter(f"{p}_column_names", columns), constants=_constants(p, columns)),
            f"""\
  ! The halo (columns along x and along y) the neighbour windows of the features read.
  pure subroutine {p}_halo_needed(dx, dy, hx_needed, hy_needed)
    real(real64), intent(in) :: dx, dy
    integer, intent(out) :: hx_needed, hy_needed
    hx_needed = 0
    hy_needed = 0
{_text(halo)}  end subroutine {p}_halo_needed

  ! Features of the nx x ny own columns from fields on the own columns and a halo of hx, hy
  ! columns (the block periodic); status and message as in the module's header.
  pure subroutine {p}_host_features({FIELD_ARGUMENTS}, &
      features, status, message)
{_DECLARATIONS}
    real(real64), intent(out) :: features({p}_n_host_features, nx * ny)
    integer, intent(out) :: status
    character(len=*), intent(out) :: message
    ! The fields the recipe's features read: only these are checked and read.
{_text(flags)}{_text(declarations)}    character(len=400) :: text
    integer :: ix, iy, i, k, rx, ry
    features = ieee_value(0.0_real64, ieee_quiet_nan)
    status = 0
    message = ''
    if (nx < 1 .or. ny < 1 .or. nz < 1 .or. hx < 0 .or. hy < 0) then
      status = 3
      write (text, '("nx, ny, nz = ", i0, ", ", i0, ", ", i0, " must be >= 1 and hx, hy = ", i0, ", ", i0, &
          &" >= 0")') nx, ny, nz, hx, hy
      message = text
      return
    end if
    if (.not. (ieee_is_finite(dx) .and. ieee_is_finite(dy))) then
      status = 2
      message = 'dx = ' // trim({p}_number_text(dx)) // ', dy = ' // trim({p}_number_text(dy)) // ' m: must be finite'
      return
    end if
    if (dx <= 0.0_real64 .or. dy <= 0.0_real64) then
      status = 3
      message = 'dx = ' // trim({p}_number_text(dx)) // ', dy = ' // trim({p}_number_text(dy)) // ' m: must be > 0'
      return
    end if
    do k = 1, nz + 1
      if (.not. ieee_is_finite(z_edge(k))) then
        status = 2
        write (text, '("z_edge(", i0, ") = ", a, " m: not finite")') k, trim({p}_number_text(z_edge(k)))
      else if (k > 1) then
        if (z_edge(k) <= z_edge(k - 1)) then
          status = 3
          write (text, '("z_edge(", i0, ") = ", a, " m: layer edges must be strictly increasing")') &
              k, trim({p}_number_text(z_edge(k)))
        end if
      end if
      if (status /= 0) then
        message = text
        return
      end if
    end do
    call {p}_halo_needed(dx, dy, rx, ry)
    if (rx > hx .or. ry > hy) then
      status = 1
      write (text, '("feature ", a, " reads ", i0, " columns along x and ", i0, " along y; the halo has ", i0, &
          &" and ", i0)') '{widest or ""}', rx, ry, hx, hy
      message = text
      return
    end if
{_text(checks)}    if (status /= 0) return
{_text(derived)}    do iy = 1, ny
      do ix = 1, nx
        i = ix + (iy - 1) * nx
{_text(per_column)}      end do
    end do
  end subroutine {p}_host_features
"""]
    body += [_ALL_HELPERS[name][0].format(p=p) for name in _with_dependencies(helpers, _ALL_HELPERS)]
    text = "\n".join(body) + f"end module {p}_features\n"
    text = "".join(_fit(line) + "\n" for line in text.splitlines())
    long = [line for line in text.splitlines() if len(line) >= _LINE_LIMIT]
    if long:
        raise ValidationError(f"generated Fortran has a line of {len(long[0])} characters (limit {_LINE_LIMIT - 1}): "
                              f"{long[0][:60]}...")
    return text


def longwave_host_module_text(prefix, document):
    """Text of module ``PREFIX_host`` of a longwave column model (see the module docstring).

    Parameters
    ----------
    prefix : str
        Fortran name of the model.
    document : dict
        Its checked coefficient document (a longwave column model).

    Returns
    -------
    str
    """
    targets = list(document["targets"]["names"])
    slots = ", ".join(str(LONGWAVE_TARGETS.index(t) + 1) for t in targets)
    p = prefix
    text = f"""\
! Generated by surrogate3d export: the one-call host interface of the longwave 3D correction
! "{document['model']['name']}". Host fields of a sub-domain with a halo in (the arguments of
! {p}_host_features), corrected longwave fields [W m-2] out.
module {p}_host
  use, intrinsic :: iso_fortran_env, only: real64
  use, intrinsic :: ieee_arithmetic, only: ieee_value, ieee_quiet_nan
  use {p}_correction
  use {p}_features, only: {p}_host_features, {p}_n_host_features
  implicit none
  private
  public :: {p}_correct_host

  !> The plane of longwave_fluxes holding each of the model's targets ({p}_target_names).
  integer, parameter :: flux_slot({p}_n_targets) = [{slots}]

contains

  !> The own columns of a sub-domain with a halo: features, correction and envelope flag.
  !> corrections(m, i) is the correction [W m-2] of target m ({p}_target_names) of own column
  !> i = ix + (iy - 1) * nx and fluxes(m, i) the host's own field plus it; outside(i) flags a column
  !> outside the training envelope, n_outside counts them. No clear-sky gate and no consistency step:
  !> every column stands alone, so a decomposed host needs no sum over processes. status /= 0 and
  !> message say what is wrong with the input (then fluxes and corrections are NaN and every column is
  !> flagged).
  pure subroutine {p}_correct_host(model, {FIELD_ARGUMENTS}, &
      fluxes, corrections, outside, n_outside, status, message)
    type({p}_coefficients), intent(in) :: model
{_DECLARATIONS}
    real(real64), intent(out), dimension({p}_n_targets, nx * ny) :: fluxes, corrections
    logical, intent(out) :: outside(nx * ny)
    integer, intent(out) :: n_outside, status
    character(len=*), intent(out) :: message
    real(real64), allocatable :: features(:, :)
    integer :: ix, iy, i
    allocate (features({p}_n_host_features, nx * ny))
    call {p}_host_features({FIELD_ARGUMENTS}, &
      features, status, message)
    if (status /= 0) then
      ! Nothing usable: NaN fields and corrections, every column flagged.
      fluxes = ieee_value(0.0_real64, ieee_quiet_nan)
      corrections = fluxes
      outside = .true.
      n_outside = nx * ny
      return
    end if
    call {p}_correct_columns(model, nx * ny, features, corrections, outside, n_outside)
    do iy = 1, ny
      do ix = 1, nx
        i = ix + (iy - 1) * nx
        fluxes(:, i) = longwave_fluxes(ix, iy, flux_slot) + corrections(:, i)
      end do
    end do
  end subroutine {p}_correct_host
end module {p}_host
"""
    return "".join(_fit(line) + "\n" for line in text.splitlines())


def has_longwave_host_interface(document):
    """Whether a document gets the longwave host interface: a longwave column model.

    Parameters
    ----------
    document : dict
        A checked coefficient document.

    Returns
    -------
    bool
    """
    from ..core.coefficient_format import PROFILE_FIELD
    from ..pairs.longwave_features import feature_recipe_from_dict, recipe_spectrum

    return (not (document.get(PROFILE_FIELD) or {}).get("layer_features")
            and recipe_spectrum(feature_recipe_from_dict(document["feature_recipe"])) == "longwave")


def longwave_host_files(document):
    """``{file name: text}`` of the host interface of a longwave column model: ``NAME_features.f90``,
    ``NAME_host.f90``, the example driver ``NAME_host_driver.f90`` and the halo statement ``NAME_halo.md``.

    Parameters
    ----------
    document : dict
        A checked coefficient document of a longwave column model (:func:`has_longwave_host_interface`).

    Returns
    -------
    dict of str -> str
    """
    from ..runtime.model import CorrectionModel
    from .fortran import fortran_name

    prefix = fortran_name(document["model"]["name"])
    model = CorrectionModel.from_document(document)
    return {f"{prefix}_features.f90": longwave_features_module_text(prefix, model.recipe, model.column_feature_names),
            f"{prefix}_host.f90": longwave_host_module_text(prefix, document),
            f"{prefix}_host_driver.f90": longwave_host_driver_text(prefix),
            f"{prefix}_halo.md": longwave_halo_statement(model.name, model.column_feature_names)}


def longwave_halo_statement(name, column_names):
    """Markdown: the halo a longwave model's features need (the widest neighbour window).

    Parameters
    ----------
    name : str
        The model's name.
    column_names : sequence of str
        Its feature columns.

    Returns
    -------
    str
    """
    from .fortran import fortran_name

    radii = sorted({_WINDOWS[c] for c in column_names if c in _WINDOWS})
    lines = [f"# Halo of the longwave model `{name}`", ""]
    if not radii:
        lines.append("No feature reads beyond its own column: the model needs no halo.")
    else:
        widest = radii[-1]
        lines += [f"Only the neighbour windows of the total cloud fraction reach beyond a column; the widest reaches "
                  f"{widest:g} m beyond the column's sides, so the halo is `ceiling({widest:g} m / dx)` columns along "
                  f"x and `ceiling({widest:g} m / dy)` along y (`{fortran_name(name)}_halo_needed`), whatever the "
                  "sun and the clouds:", "",
                  "| host column size | halo (columns) |", "| ---: | ---: |"]
        lines += [f"| {size:g} m | {int(np.ceil(widest / size - 1e-9))} |" for size in (500.0, 1000.0, 2000.0, 5000.0)]
    return "\n".join(lines) + "\n"


def longwave_host_driver_text(prefix):
    """Text of the example program ``PREFIX_host_driver`` of a longwave model.

    Usage of the program: ``PREFIX_host_driver COEFFICIENTS [--repeat N] HOST_FIELD_FILE...``.
    The files are longwave host field files (:mod:`surrogate3d.runtime.host_field_file`,
    written by ``surrogate3d host-fields`` with longwave models): the whole periodic domain,
    or the sub-domains of one domain, each corrected by one call of ``PREFIX_correct_host``
    (no sum over processes is needed).  It prints one line per own column: the column's
    1-based indices in the whole domain, the corrected fields, the corrections [W m-2] and
    1 or 0 for outside the training envelope or not.  With ``--repeat N`` it times N sweeps
    of the first file's columns instead (best of three; ``key value`` lines).
    """
    from .fortran_host import REPEAT_ARGUMENT, STOP_ON

    p = prefix
    text = f"""\
! Generated by surrogate3d export: example driver of the longwave host interface {p}_host.
! Usage: {p}_host_driver COEFFICIENTS [--repeat N] HOST_FIELD_FILE...
! The longwave host field files are written by 'surrogate3d host-fields' with longwave models
! (docs/host-model-guide.md): the whole periodic domain, or the sub-domains of one domain, each
! corrected by one call (a longwave correction needs no sum over processes). Prints per own column:
! ix iy (1-based, whole domain), the corrected fields and the corrections [W m-2] of the targets in
! {p}_target_names, and 1 if the column lies outside the training envelope (else 0).
program {p}_host_driver
  use, intrinsic :: iso_fortran_env, only: real64, int64, error_unit
  use {p}_correction
  use {p}_host
  implicit none

  !> One sub-domain's host fields (with their halo) and results.
  type :: subdomain
    integer :: nx, ny, nz, hx, hy, ix0, iy0, nx_domain, ny_domain
    real(real64) :: dx, dy
    real(real64), allocatable :: z_edge(:), cloud_fraction(:, :, :), air_temperature(:, :, :)
    real(real64), allocatable :: cover(:, :), edge_length(:, :), water_path(:, :), surface_temperature(:, :)
    real(real64), allocatable :: emissivity(:, :), clear_sky(:, :, :), own_fluxes(:, :, :)
    real(real64), allocatable :: fluxes(:, :), corrections(:, :)
    logical, allocatable :: outside(:)
  end type subdomain

  type({p}_coefficients) :: model
  type(subdomain), allocatable :: parts(:)
  character(len=1024) :: coefficients_path, argument, message
  integer :: status, n_args, first, n_parts, j, i, n_outside, n_repeat

  n_args = command_argument_count()
  if (n_args < 2) call stop_on(1, 'usage: {p}_host_driver COEFFICIENTS [--repeat N] FILE...')
  call get_command_argument(1, coefficients_path)
  first = 2
{REPEAT_ARGUMENT}  n_parts = n_args - first + 1
  if (n_parts < 1) call stop_on(1, 'no host field file given')
  call {p}_read_coefficients(trim(coefficients_path), model, status, message)
  call stop_on(status, message)
  allocate (parts(n_parts))
  do j = 1, n_parts
    call get_command_argument(first + j - 1, argument)
    call read_host_fields(trim(argument), parts(j))
  end do

  if (n_repeat > 0) then
    call time_corrections(parts(1))
    stop
  end if

  do j = 1, n_parts
    call correct(parts(j))
    associate (d => parts(j))
      do i = 1, d%nx * d%ny
        write (*, '(2i7, *(1x, es25.17e3))') d%ix0 + mod(i - 1, d%nx) + 1, d%iy0 + (i - 1) / d%nx + 1, &
          d%fluxes(:, i), d%corrections(:, i), merge(1.0_real64, 0.0_real64, d%outside(i))
      end do
    end associate
  end do

contains

  !> The one call of the host interface on one sub-domain.
  subroutine correct(d)
    type(subdomain), intent(inout) :: d
    if (.not. allocated(d%fluxes)) then
      allocate (d%fluxes({p}_n_targets, d%nx * d%ny), d%corrections({p}_n_targets, d%nx * d%ny))
      allocate (d%outside(d%nx * d%ny))
    end if
    call {p}_correct_host(model, d%nx, d%ny, d%nz, d%hx, d%hy, d%dx, d%dy, d%z_edge, d%cloud_fraction, &
      d%air_temperature, d%cover, d%edge_length, d%water_path, d%surface_temperature, d%emissivity, d%clear_sky, &
      d%own_fluxes, d%fluxes, d%corrections, d%outside, n_outside, status, message)
    call stop_on(status, message)
  end subroutine correct

  !> With --repeat N: N sweeps of the first file's columns timed, best of three; key value lines (the
  !> checksum keeps the compiler from skipping sweeps).
  subroutine time_corrections(d)
    type(subdomain), intent(inout) :: d
    integer(int64) :: start, finish, rate
    integer :: sweep, trial
    real(real64) :: best, checksum
    best = huge(1.0_real64)
    checksum = 0.0_real64
    do trial = 1, 3
      call system_clock(start, rate)
      do sweep = 1, n_repeat
        call correct(d)
        checksum = checksum + d%corrections(1, 1 + mod(sweep, d%nx * d%ny))
      end do
      call system_clock(finish)
      best = min(best, real(finish - start, real64) / real(rate, real64))
    end do
    write (*, '(a, 1x, i0)') 'columns', d%nx * d%ny
    write (*, '(a, 1x, i0)') 'sweeps', n_repeat
    write (*, '(a, 1x, es15.8)') 'microseconds_per_column', 1.0e6_real64 * best / real(n_repeat * d%nx * d%ny, real64)
    write (*, '(a, 1x, es15.8)') 'checksum', checksum
  end subroutine time_corrections

{STOP_ON}
  !> Stop unless a read worked (ios 0), gave the expected key and, if given, the expected count.
  subroutine expect(ios, key, expected, path, count, wanted)
    integer, intent(in) :: ios
    character(len=*), intent(in) :: key, expected, path
    integer, intent(in), optional :: count, wanted
    character(len=200) :: text
    if (ios /= 0) call stop_on(1, 'host field file ' // path // ': cannot read ' // expected // ' (truncated?)')
    if (trim(key) /= expected) call stop_on(1, 'host field file ' // path // ': expected ' // expected // &
                                                ', found ' // trim(key))
    if (present(count) .and. present(wanted)) then
      if (count /= wanted) then
        write (text, '(a, 1x, i0, a, i0)') expected, count, ' values; expected ', wanted
        call stop_on(1, 'host field file ' // path // ': ' // trim(text))
      end if
    end if
  end subroutine expect

  !> Read one longwave host field file (surrogate3d.runtime.host_field_file) into d, arrays with their halo.
  subroutine read_host_fields(path, d)
    character(len=*), intent(in) :: path
    type(subdomain), intent(out) :: d
    integer :: unit, ios, count
    character(len=64) :: key
    character(len=256) :: line
    open (newunit=unit, file=path, status='old', action='read', iostat=ios)
    if (ios /= 0) call stop_on(1, 'cannot open host field file ' // path)
    read (unit, '(a)', iostat=ios) line
    if (ios /= 0 .or. trim(line) /= 'surrogate3d longwave host fields 1') then
      call stop_on(1, path // ' is not a longwave host field file of version 1')
    end if
    read (unit, *, iostat=ios) key, d%nx, d%ny, d%nz, d%hx, d%hy
    call expect(ios, key, 'grid', path)
    read (unit, *, iostat=ios) key, d%ix0, d%iy0
    call expect(ios, key, 'origin', path)
    read (unit, *, iostat=ios) key, d%nx_domain, d%ny_domain
    call expect(ios, key, 'domain', path)
    read (unit, *, iostat=ios) key, d%dx
    call expect(ios, key, 'dx', path)
    read (unit, *, iostat=ios) key, d%dy
    call expect(ios, key, 'dy', path)
    associate (nx => d%nx, ny => d%ny, nz => d%nz, hx => d%hx, hy => d%hy)
      allocate (d%z_edge(nz + 1), d%cloud_fraction(1 - hx:nx + hx, 1 - hy:ny + hy, nz))
      allocate (d%air_temperature(1 - hx:nx + hx, 1 - hy:ny + hy, nz), d%cover(1 - hx:nx + hx, 1 - hy:ny + hy))
      allocate (d%edge_length(1 - hx:nx + hx, 1 - hy:ny + hy), d%water_path(1 - hx:nx + hx, 1 - hy:ny + hy))
      allocate (d%surface_temperature(1 - hx:nx + hx, 1 - hy:ny + hy), d%emissivity(1 - hx:nx + hx, 1 - hy:ny + hy))
      allocate (d%clear_sky(1 - hx:nx + hx, 1 - hy:ny + hy, 2), d%own_fluxes(1 - hx:nx + hx, 1 - hy:ny + hy, 5))
    end associate
    read (unit, *, iostat=ios) key, count
    call expect(ios, key, 'z_edge', path, count, size(d%z_edge))
    read (unit, *, iostat=ios) d%z_edge
    call expect(ios, 'z_edge', 'z_edge', path)
    read (unit, *, iostat=ios) key, count
    call expect(ios, key, 'layer_cloud_fraction', path, count, size(d%cloud_fraction))
    read (unit, *, iostat=ios) d%cloud_fraction
    call expect(ios, 'layer_cloud_fraction', 'layer_cloud_fraction', path)
    read (unit, *, iostat=ios) key, count
    call expect(ios, key, 'layer_air_temperature', path, count, size(d%air_temperature))
    read (unit, *, iostat=ios) d%air_temperature
    call expect(ios, 'layer_air_temperature', 'layer_air_temperature', path)
    read (unit, *, iostat=ios) key, count
    call expect(ios, key, 'total_cloud_fraction', path, count, size(d%cover))
    read (unit, *, iostat=ios) d%cover
    call expect(ios, 'total_cloud_fraction', 'total_cloud_fraction', path)
    read (unit, *, iostat=ios) key, count
    call expect(ios, key, 'cloud_edge_length', path, count, size(d%edge_length))
    read (unit, *, iostat=ios) d%edge_length
    call expect(ios, 'cloud_edge_length', 'cloud_edge_length', path)
    read (unit, *, iostat=ios) key, count
    call expect(ios, key, 'liquid_water_path', path, count, size(d%water_path))
    read (unit, *, iostat=ios) d%water_path
    call expect(ios, 'liquid_water_path', 'liquid_water_path', path)
    read (unit, *, iostat=ios) key, count
    call expect(ios, key, 'surface_temperature', path, count, size(d%surface_temperature))
    read (unit, *, iostat=ios) d%surface_temperature
    call expect(ios, 'surface_temperature', 'surface_temperature', path)
    read (unit, *, iostat=ios) key, count
    call expect(ios, key, 'surface_longwave_emissivity', path, count, size(d%emissivity))
    read (unit, *, iostat=ios) d%emissivity
    call expect(ios, 'surface_longwave_emissivity', 'surface_longwave_emissivity', path)
    read (unit, *, iostat=ios) key, count
    call expect(ios, key, 'clear_sky_fluxes', path, count, size(d%clear_sky))
    read (unit, *, iostat=ios) d%clear_sky
    call expect(ios, 'clear_sky_fluxes', 'clear_sky_fluxes', path)
    read (unit, *, iostat=ios) key, count
    call expect(ios, key, 'longwave_fluxes', path, count, size(d%own_fluxes))
    read (unit, *, iostat=ios) d%own_fluxes
    call expect(ios, 'longwave_fluxes', 'longwave_fluxes', path)
    close (unit)
  end subroutine read_host_fields
end program {p}_host_driver
"""
    return "".join(_fit(line) + "\n" for line in text.splitlines())
