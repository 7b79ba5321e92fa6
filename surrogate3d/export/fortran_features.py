"""The host features of an exported model as a Fortran 2008 module (``NAME_features.f90``).

:func:`features_module_text` generates module ``NAME_features``, which computes a
model's feature matrix from a host model's own fields, the Fortran twin of
:func:`surrogate3d.pairs.features.compute_features` (periodic domain) and
:func:`surrogate3d.runtime.halo.subdomain_features` (a sub-domain with a halo).  Only the
procedures the recipe's features need are emitted; the recipe's parameters (radii,
thresholds, distances) are constants of the generated code.

Public interface of the generated module (``docs/host-model-guide.md``):

``NAME_n_host_features``
    Number of feature columns (rows of ``features``), in the model's column order.
``NAME_halo_needed(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, hx_needed, hy_needed[, ...])``
    Pure: the halo (columns along x and along y) the features need for this geometry,
    the largest reach over the feature columns, as
    :func:`surrogate3d.runtime.halo.halo_width`; -1 for a geometry
    ``NAME_host_features`` refuses (status 2, 3 or 4).
``NAME_host_features(nx, ny, nz, hx, hy, dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge, ...)``
    The features of the ``nx x ny`` own columns from fields given on the own columns and
    a halo of ``hx`` columns along x and ``hy`` along y: arrays dimensioned
    ``(1-hx:nx+hx, 1-hy:ny+hy[, nz])``, layer 1 the lowest (numpy's ``(nz, ny, nx)``
    C-order arrays are the same memory); ``independent_column_fluxes(..., 5)`` in the
    order of :data:`surrogate3d.core.data_model.TARGETS`.  ``features(j, i)`` is feature
    column ``j`` of own column ``i = ix + (iy - 1) nx`` (numpy's row-major order).

Both take an optional last argument ``slant_path_reach`` (real64, m), the host's cap on
the slant paths' horizontal travel (host field ``slant_path_reach`` of
:mod:`surrogate3d.pairs.features`; :func:`surrogate3d.core.slant_path.path_weights`):
beyond it the paths rise vertically, which bounds the halo at a low sun.  Absent, there
is no cap; both procedures must be given the same.

Layout and periodicity: the features treat the block of own columns plus halo as a
periodic domain, exactly as :func:`~surrogate3d.runtime.halo.subdomain_features` does
(stencils wrap around the block), and keep the own columns.  With a halo at least
``NAME_halo_needed`` wide no stencil of an own column wraps, so a whole periodic domain
whose halo the host fills by periodic copy gives the features of ``compute_features``,
and a sub-domain those of the whole domain.  Neighbour windows are sums over the
window's columns in order, as numpy's (bit for bit); ``ln(1 + tau)`` comes from
Goldberg's formula (Fortran 2008 has no ``log1p``) and agrees with numpy to rounding; the
other features repeat numpy's arithmetic operation by operation
(``tests/export/test_fortran_features.py``).  With such a halo every feature of a column
depends on the values it reads only, not on the block: a sub-domain gives the whole
domain's features bit for bit, so that no tree split of a model falls differently in
another decomposition.  A fraction of a column of at most 1e-9 at a window's edges is left
out, in numpy too, as the halo rule ``ceiling(radius / dx - 1e-9)`` leaves it out.  Each neighbourhood mean is computed once however many
columns read it, and the direct-beam priors in one pass
(:func:`surrogate3d.export.fortran_slant.slant_priors_call`).

Status codes of ``NAME_host_features`` (0 is success; ``message`` says what is wrong,
``features`` is NaN on failure):

1. the halo is narrower than a feature column reads (the first of the columns reading
   furthest named, with its reach and the halo);
2. a non-finite value in a field the recipe reads (own columns and halo), in
   ``dx``, ``dy`` or in ``z_edge`` (the field and its ``(ix, iy[, k])`` index);
3. a value outside its allowed range (``_ALLOWED_RANGE`` of
   :mod:`surrogate3d.pairs.features`), ``dx`` or ``dy`` not positive, ``z_edge`` not
   strictly increasing, a dimension below 1 (a halo below 0), or ``slant_path_reach``
   negative or not finite;
4. an impossible sun angle: the zenith angle outside [0, 90) degree, or either angle
   not finite.

Fields the recipe does not read are neither read nor checked.  The feature
``independent_column_surface_downward_flux`` is formed as direct plus diffuse
(``independent_column_fluxes(:, :, 2) + (:, :, 3)``), the fields the feature registry
lists for it (numpy forms it so when the host fields hold the two parts only); slot 1 is
not read.  The recipe parameter ``host_fluxes`` changes no computation (as in numpy).

``NAME_host_features`` is ``pure`` unless the recipe has slant-path features (whose
procedures need not be); the module writes no module variable at run time (OpenMP-safe)
and uses the intrinsic modules ``iso_fortran_env`` and ``ieee_arithmetic`` only.

The slant-path family (``slant_optical_depth``, the direct-beam priors and
interceptions) comes from :mod:`surrogate3d.export.fortran_slant`, imported only when a
recipe needs one of its features.
"""

import re
import textwrap

from ..core.data_model import TARGETS
from ..errors import ValidationError
from ..pairs.features import FEATURES, column_name

#: Features whose Fortran this module writes (every registered feature but the slant-path family).
IMPLEMENTED_FEATURES = frozenset(
    ["cos_solar_zenith", "surface_albedo", "log_column_optical_depth", "cloud_fraction",
     "column_optical_depth_relative_std", "cloud_top_height", "cloud_base_height", "cloud_top_shadow_length",
     "cloud_edge_length", "neighbour_mean_cloud_fraction", "neighbour_contrast_cloud_fraction",
     "neighbour_mean_log_optical_depth", "neighbour_contrast_log_optical_depth", "cloud_edge_distance",
     "log_optical_depth_gradient_along_beam", "log_optical_depth_gradient_across_beam",
     "cloud_top_height_upsun_minus_downsun"]
    + [f"independent_column_{flux}" for flux in TARGETS]
    + [name for name in FEATURES if name.startswith("neighbour_excess_independent_column_")])

#: Fortran statements stay below the 132-character line limit of free form.
_LINE_LIMIT = 132

#: Longest prefix: the longest generated name (prefix + "_n_host_features") stays within Fortran's 63 characters.
_PREFIX_LIMIT = 40

#: Plane arguments of NAME_host_features with their allowed range (Fortran bounds, interval text), checked when read.
_PLANES = {"surface_albedo": ("1.0_real64", "[0, 1]"), "total_cloud_fraction": ("1.0_real64", "[0, 1]"),
           "column_optical_depth_mean": ("huge(1.0_real64)", "[0, inf)"),
           "column_optical_depth_std": ("huge(1.0_real64)", "[0, inf)"),
           "cloud_edge_length": ("huge(1.0_real64)", "[0, inf)")}
_LAYERS = {"layer_cloud_fraction": ("1.0_real64", "[0, 1]"), "layer_optical_depth": ("huge(1.0_real64)", "[0, inf)"),
           "layer_clear_sky_optical_depth": ("huge(1.0_real64)", "[0, inf)")}

#: Features reading the log of the column optical depth (block array ``log_tau``).
_LOG_TAU = ("log_column_optical_depth", "neighbour_mean_log_optical_depth", "neighbour_contrast_log_optical_depth",
            "log_optical_depth_gradient_along_beam", "log_optical_depth_gradient_across_beam")
#: Features reading the cloud-top or cloud-base height (block arrays ``top``, ``base``).
_EXTENT = ("cloud_top_height", "cloud_base_height", "cloud_top_shadow_length", "cloud_top_height_upsun_minus_downsun")

#: The slant depths computed together when a recipe has both (fortran_slant.slant_depth_pair_call).
_SLANT_DEPTH_PAIR = ("slant_optical_depth", "slant_minus_vertical_optical_depth")

_HEADER = """\
! Generated by surrogate3d export: the host features of model {p}
! (feature recipe "{recipe}"), the Fortran twin of surrogate3d.pairs.features.compute_features;
! docs/host-model-guide.md.
!
! {p}_halo_needed: the halo a geometry needs.
! {p}_host_features: the features of the nx x ny own columns from fields dimensioned
! (1-hx:nx+hx, 1-hy:ny+hy[, nz]), layer 1 the lowest, treating the block of own columns and
! halo as periodic (a host fills the halo of a periodic domain by periodic copy).
! Both take an optional last argument slant_path_reach [m], the host's cap on the slant
! paths' horizontal travel (absent: no cap); give both the same.
! features(j, ix + (iy - 1) * nx) is feature column j (the order of {p}_column_names)
! of own column (ix, iy).
!
! status of {p}_host_features (features is NaN unless 0; message says what and where):
!   0  success
!   1  halo narrower than a feature column reads (the column, its reach and the halo named)
!   2  a non-finite value in a field the recipe reads, in dx, dy or in z_edge (field and index)
!   3  a value outside its allowed range, dx or dy not positive, z_edge not strictly
!      increasing, nx, ny, nz < 1 or hx, hy < 0, or slant_path_reach negative or not finite
!   4  impossible sun angle: zenith outside [0, 90) degree, or an angle not finite
! Fields the recipe does not read are neither read nor checked.
module {p}_features
  use, intrinsic :: iso_fortran_env, only: real64
  use, intrinsic :: ieee_arithmetic, only: ieee_is_finite, ieee_value, ieee_quiet_nan
  implicit none
  private
  public :: {p}_n_host_features, {p}_halo_needed, {p}_host_features

  integer, parameter :: {p}_n_host_features = {n}
{names}
  real(real64), parameter :: {p}_degree = 3.141592653589793_real64 / 180.0_real64
{declarations}
contains
"""

#: Helper procedures: name suffix -> (Fortran text with ``{p}`` for the prefix, helpers it calls).
_HELPERS = {
    "wrap": ("""\
  ! Index i of a periodic axis of n points starting at first (the block of own columns and halo).
  elemental integer function {p}_wrap(i, first, n)
    integer, intent(in) :: i, first, n
    {p}_wrap = first + modulo(i - first, n)
  end function {p}_wrap
""", ()),
    "cells": ("""\
  ! Columns a distance reaches across columns of the given size: ceiling(distance / size - 1e-9),
  ! 0 for no distance (surrogate3d.runtime.halo._cells).
  pure integer function {p}_cells(distance, size)
    real(real64), intent(in) :: distance, size
    if (distance > 0.0_real64) then
      ! Capped at 10^9 columns so that a tiny column size cannot overflow the integer.
      {p}_cells = ceiling(min(distance / size - 1.0e-9_real64, 1.0e9_real64))
    else
      {p}_cells = 0
    end if
  end function {p}_cells
""", ()),
    "log1p": ("""\
  ! ln(1 + x), accurate for small x as well (Goldberg 1991, "What every computer scientist should
  ! know about floating-point arithmetic", Theorem 4): Fortran 2008 has no log1p.
  elemental real(real64) function {p}_log1p(x)
    real(real64), intent(in) :: x
    real(real64) :: u
    u = 1.0_real64 + x
    if (u == 1.0_real64) then
      {p}_log1p = x
    else
      {p}_log1p = log(u) * (x / (u - 1.0_real64))
    end if
  end function {p}_log1p
""", ()),
    "log_tau": ("""\
  ! ln(1 + tau) of the column optical depth tau (the sum over layers, lowest first) on the block.
  pure subroutine {p}_log_tau(layer_optical_depth, nx, ny, nz, hx, hy, log_tau)
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: layer_optical_depth(1-hx:nx+hx, 1-hy:ny+hy, nz)
    real(real64), intent(out) :: log_tau(1-hx:nx+hx, 1-hy:ny+hy)
    integer :: k
    log_tau = layer_optical_depth(:, :, 1)
    do k = 2, nz
      log_tau = log_tau + layer_optical_depth(:, :, k)
    end do
    log_tau = {p}_log1p(log_tau)
  end subroutine {p}_log_tau
""", ("log1p",)),
    "cloud_extent": ("""\
  ! Top edge of the highest and bottom edge of the lowest layer whose cloud fraction exceeds
  ! the threshold [m], 0 without such a layer, on the block.
  pure subroutine {p}_cloud_extent(fraction, z_edge, nx, ny, nz, hx, hy, threshold, top, base)
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: fraction(1-hx:nx+hx, 1-hy:ny+hy, nz), z_edge(nz + 1), threshold
    real(real64), intent(out), dimension(1-hx:nx+hx, 1-hy:ny+hy) :: top, base
    integer :: k
    top = 0.0_real64
    base = 0.0_real64
    do k = 1, nz
      where (fraction(:, :, k) > threshold) top = z_edge(k + 1)
    end do
    do k = nz, 1, -1
      where (fraction(:, :, k) > threshold) base = z_edge(k)
    end do
  end subroutine {p}_cloud_extent
""", ()),
    "window_mean": ("""\
  ! Mean of values over the window reaching radius [m] beyond each side of the column, partial
  ! columns weighted by the fraction inside (surrogate3d.pairs.features.neighbourhood_mean): a sum
  ! along x, then along y, over the periodic block.  Each sum runs over the window's columns in
  ! order, so that it depends on the window's values only: a column's mean is the same bit for bit
  ! whatever the block (a sub-domain's and the whole domain's agree, and numpy's, which adds the
  ! same terms in the same order).  A sliver of at most 1e-9 of a column at the edges is left out,
  ! as the halo rule (ceiling(radius / dx - 1e-9)) does not count it.
  pure subroutine {p}_window_mean(values, nx, ny, hx, hy, radius, dx, dy, mean)
    integer, intent(in) :: nx, ny, hx, hy
    real(real64), intent(in) :: values(1-hx:nx+hx, 1-hy:ny+hy), radius, dx, dy
    real(real64), intent(out) :: mean(nx, ny)
    real(real64), allocatable :: along_x(:, :)
    integer, allocatable :: column(:), row(:)
    real(real64) :: half_x, half_y, part_x, part_y, total
    integer :: mx, my, ix, iy, j, o
    half_x = radius / dx
    half_y = radius / dy
    mx = floor(half_x)
    my = floor(half_y)
    part_x = half_x - real(mx, real64)
    part_y = half_y - real(my, real64)
    ! The block column of own column ix (ix = -mx - 1 .. nx + mx + 1) and the block row of own row iy,
    ! wrapped around the periodic block.
    allocate (column(-mx - 1:nx + mx + 1), row(-my - 1:ny + my + 1), along_x(nx, -my - 1:ny + my + 1))
    column = {p}_wrap([(j, j = -mx - 1, nx + mx + 1)], 1 - hx, nx + 2 * hx)
    row = {p}_wrap([(j, j = -my - 1, ny + my + 1)], 1 - hy, ny + 2 * hy)
    ! Along x, in the rows the windows of the own rows reach.
    do j = -my - 1, ny + my + 1
      iy = row(j)
      do ix = 1, nx
        total = 0.0_real64
        do o = ix - mx, ix + mx
          total = total + values(column(o), iy)
        end do
        if (part_x > 1.0e-9_real64) total = total + part_x * (values(column(ix - mx - 1), iy) &
            + values(column(ix + mx + 1), iy))
        along_x(ix, j) = total
      end do
    end do
    ! Along y, a row of own columns at a time.
    do iy = 1, ny
      mean(:, iy) = 0.0_real64
      do o = iy - my, iy + my
        mean(:, iy) = mean(:, iy) + along_x(:, o)
      end do
      if (part_y > 1.0e-9_real64) mean(:, iy) = mean(:, iy) + part_y * (along_x(:, iy - my - 1) + &
          along_x(:, iy + my + 1))
      mean(:, iy) = mean(:, iy) / ((2.0_real64 * half_x + 1.0_real64) * (2.0_real64 * half_y + 1.0_real64))
    end do
  end subroutine {p}_window_mean
""", ("wrap",)),
    "edge_distance": ("""\
  ! Signed distance [m] to the nearest cloud edge, positive in cloud (cloud fraction at least
  ! edge_fraction), negative in clear sky (surrogate3d.pairs.features.cloud_edge_distance):
  ! D - min(dx, dy) / 2 capped at cap, D the distance between the column centre and the nearest
  ! centre of the other kind within kx, ky columns (kx = min(ceiling(reach / dx), nbx / 2),
  ! reach = cap + min(dx, dy) / 2), infinite beyond reach.  As numpy's _distance_to: the
  ! nearest of each kind along every row first, then over the rows.
  pure subroutine {p}_edge_distance(fraction, nx, ny, hx, hy, dx, dy, edge_fraction, cap, distance)
    integer, intent(in) :: nx, ny, hx, hy
    real(real64), intent(in) :: fraction(1-hx:nx+hx, 1-hy:ny+hy), dx, dy, edge_fraction, cap
    real(real64), intent(out) :: distance(nx, ny)
    ! Offset along x of the nearest cloudy (kind 1) and clear (kind 2) column in each row, -1 if none.
    integer, allocatable :: nearest(:, :, :), columns(:), rows(:)
    real(real64) :: half, reach, squared, best, left, right
    integer :: kx, ky, ix, iy, o, kind, nbx, nby, row, j
    logical :: cloudy, found
    half = 0.5_real64 * min(dx, dy)
    reach = cap + half
    nbx = nx + 2 * hx
    nby = ny + 2 * hy
    kx = ceiling(min(reach / dx, real(nbx / 2, real64)))
    ky = ceiling(min(reach / dy, real(nby / 2, real64)))
    allocate (nearest(nx, 1-hy:ny+hy, 2), columns(1-kx:nx+kx), rows(1-ky:ny+ky))
    ! The block column of own column ix + o and the block row of own row iy + o, wrapped around the
    ! periodic block once for all.
    columns = {p}_wrap([(j, j = 1 - kx, nx + kx)], 1 - hx, nbx)
    rows = {p}_wrap([(j, j = 1 - ky, ny + ky)], 1 - hy, nby)
    nearest = -1
    do iy = 1 - hy, ny + hy
      do ix = 1, nx
        do o = kx, 0, -1
          left = fraction(columns(ix - o), iy)
          right = fraction(columns(ix + o), iy)
          if (left >= edge_fraction .or. right >= edge_fraction) nearest(ix, iy, 1) = o
          if (left < edge_fraction .or. right < edge_fraction) nearest(ix, iy, 2) = o
        end do
      end do
    end do
    do iy = 1, ny
      do ix = 1, nx
        cloudy = fraction(ix, iy) >= edge_fraction
        ! A cloudy column looks for the nearest clear one, a clear column for the nearest cloudy one.
        kind = merge(2, 1, cloudy)
        found = .false.
        best = 0.0_real64
        do o = -ky, ky
          row = rows(iy + o)
          if (nearest(ix, row, kind) < 0) cycle
          squared = (nearest(ix, row, kind) * dx)**2 + (o * dy)**2
          if (.not. found .or. squared < best) best = squared
          found = .true.
        end do
        distance(ix, iy) = cap
        if (found) then
          if (sqrt(best) <= reach) distance(ix, iy) = min(sqrt(best) - half, cap)
        end if
        if (.not. cloudy) distance(ix, iy) = -distance(ix, iy)
      end do
    end do
  end subroutine {p}_edge_distance
""", ("wrap",)),
    "gradient": ("""\
  ! Centred derivative of ln(1 + tau) [m-1] along the beam (across = .false.) or its magnitude
  ! across the beam (across = .true.), the beam travelling at azimuth [degree] counterclockwise
  ! from +x.
  pure subroutine {p}_gradient(log_tau, nx, ny, hx, hy, dx, dy, azimuth, across, gradient)
    integer, intent(in) :: nx, ny, hx, hy
    real(real64), intent(in) :: log_tau(1-hx:nx+hx, 1-hy:ny+hy), dx, dy, azimuth
    logical, intent(in) :: across
    real(real64), intent(out) :: gradient(nx, ny)
    real(real64) :: phi, gx, gy, sin_phi, cos_phi
    integer :: ix, iy, nbx, nby
    phi = azimuth * {p}_degree
    sin_phi = sin(phi)
    cos_phi = cos(phi)
    nbx = nx + 2 * hx
    nby = ny + 2 * hy
    do iy = 1, ny
      do ix = 1, nx
        gx = (log_tau({p}_wrap(ix + 1, 1 - hx, nbx), iy) - log_tau({p}_wrap(ix - 1, 1 - hx, nbx), iy)) &
            / (2.0_real64 * dx)
        gy = (log_tau(ix, {p}_wrap(iy + 1, 1 - hy, nby)) - log_tau(ix, {p}_wrap(iy - 1, 1 - hy, nby))) &
            / (2.0_real64 * dy)
        if (across) then
          gradient(ix, iy) = abs(-gx * sin_phi + gy * cos_phi)
        else
          gradient(ix, iy) = gx * cos_phi + gy * sin_phi
        end if
      end do
    end do
  end subroutine {p}_gradient
""", ("wrap",)),
    "bilinear_sample": ("""\
  ! Bilinear sample of values at (x + sx, y + sy), shifts in columns, over the periodic block; the
  ! four neighbours added in numpy's order (surrogate3d.pairs.features._shift_bilinear).
  pure subroutine {p}_bilinear_sample(values, nx, ny, hx, hy, sx, sy, sample)
    integer, intent(in) :: nx, ny, hx, hy
    real(real64), intent(in) :: values(1-hx:nx+hx, 1-hy:ny+hy), sx, sy
    real(real64), intent(out) :: sample(nx, ny)
    real(real64) :: wx(0:1), wy(0:1), weight
    integer :: jx, jy, ix, iy, a, b, nbx, nby
    jx = floor(sx)
    jy = floor(sy)
    wx = [1.0_real64 - (sx - real(jx, real64)), sx - real(jx, real64)]
    wy = [1.0_real64 - (sy - real(jy, real64)), sy - real(jy, real64)]
    nbx = nx + 2 * hx
    nby = ny + 2 * hy
    sample = 0.0_real64
    do b = 0, 1
      do a = 0, 1
        weight = wx(a) * wy(b)
        if (weight <= 0.0_real64) cycle
        do iy = 1, ny
          do ix = 1, nx
            sample(ix, iy) = sample(ix, iy) &
                + values({p}_wrap(ix + jx + a, 1 - hx, nbx), {p}_wrap(iy + jy + b, 1 - hy, nby)) * weight
          end do
        end do
      end do
    end do
  end subroutine {p}_bilinear_sample
""", ("wrap",)),
    "cloud_top_sides": ("""\
  ! Cloud-top height side_distance [m] toward the sun minus as far away from it [m], bilinear
  ! samples (surrogate3d.pairs.features.cloud_top_height_upsun_minus_downsun).
  pure subroutine {p}_cloud_top_sides(top, nx, ny, hx, hy, dx, dy, azimuth, side_distance, difference)
    integer, intent(in) :: nx, ny, hx, hy
    real(real64), intent(in) :: top(1-hx:nx+hx, 1-hy:ny+hy), dx, dy, azimuth, side_distance
    real(real64), intent(out) :: difference(nx, ny)
    real(real64) :: sx, sy, phi
    real(real64), allocatable :: downsun(:, :)
    phi = azimuth * {p}_degree
    sx = -side_distance * cos(phi) / dx
    sy = -side_distance * sin(phi) / dy
    allocate (downsun(nx, ny))
    call {p}_bilinear_sample(top, nx, ny, hx, hy, sx, sy, difference)
    call {p}_bilinear_sample(top, nx, ny, hx, hy, -sx, -sy, downsun)
    difference = difference - downsun
  end subroutine {p}_cloud_top_sides
""", ("bilinear_sample",)),
    "set_feature": ("""\
  ! Feature column j of the own columns from a plane of them (column(i), i = ix + (iy - 1) * nx),
  ! copied straight in (reshape would make a temporary copy first).
  pure subroutine {p}_set_feature(features, j, n, column)
    integer, intent(in) :: j, n
    real(real64), intent(inout) :: features({p}_n_host_features, n)
    real(real64), intent(in) :: column(n)
    features(j, :) = column
  end subroutine {p}_set_feature
""", ()),
    "number_text": ("""\
  ! A number as short text (g0: every digit a double needs; NaN, Inf and -Inf by name).
  pure function {p}_number_text(value) result(text)
    real(real64), intent(in) :: value
    character(len=40) :: text
    write (text, '(g0)') value
    text = adjustl(text)
  end function {p}_number_text
""", ()),
    "check_layers": ("""\
  ! Status 2 at the first non-finite value of a layer field (own columns and halo), else 3 at the
  ! first outside [low, high] ((low, high] when low_open); nothing when status is already set.
  pure subroutine {p}_check_layers(name, values, nx, ny, nz, hx, hy, low, high, low_open, interval, status, &
      message)
    character(len=*), intent(in) :: name, interval
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: values(1-hx:nx+hx, 1-hy:ny+hy, nz), low, high
    logical, intent(in) :: low_open
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    character(len=400) :: text
    integer :: ix, iy, k, pass
    if (status /= 0) return
    ! One pass when all is well: with finite bounds, a value inside them is finite too (NaN fails both);
    ! an open lower bound costs a second pass only where it is asked for.
    if (count(.not. (values >= low .and. values <= high)) == 0) then
      if (.not. low_open) return
      if (count(values == low) == 0) return
    end if
    do pass = 2, 3
      do k = 1, nz
        do iy = 1 - hy, ny + hy
          do ix = 1 - hx, nx + hx
            if (pass == 2 .and. ieee_is_finite(values(ix, iy, k))) cycle
            if (pass == 3 .and. values(ix, iy, k) >= low .and. values(ix, iy, k) <= high &
                .and. .not. (low_open .and. values(ix, iy, k) == low)) cycle
            status = pass
            write (text, '(a, "(", i0, ", ", i0, ", ", i0, ") = ", a)') name, ix, iy, k, &
                trim({p}_number_text(values(ix, iy, k)))
            if (pass == 2) then
              message = trim(text) // ': not finite'
            else
              message = trim(text) // ': outside ' // interval
            end if
            return
          end do
        end do
      end do
    end do
  end subroutine {p}_check_layers
""", ("number_text",)),
    "check_plane": ("""\
  ! Status 2 at the first non-finite value of a plane (own columns and halo), else 3 at the first
  ! outside [low, high] ((low, high] when low_open); slot > 0 names plane slot of the stacked argument
  ! (field: what that plane holds), slot 0 the plane argument itself.
  pure subroutine {p}_check_plane(argument, slot, field, values, nx, ny, hx, hy, low, high, low_open, interval, &
      status, message)
    character(len=*), intent(in) :: argument, field, interval
    integer, intent(in) :: slot, nx, ny, hx, hy
    real(real64), intent(in) :: values(1-hx:nx+hx, 1-hy:ny+hy), low, high
    logical, intent(in) :: low_open
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    character(len=400) :: text
    character(len=40) :: index
    integer :: ix, iy, pass
    if (status /= 0) return
    ! One pass when all is well, as in {p}_check_layers.
    if (count(.not. (values >= low .and. values <= high)) == 0) then
      if (.not. low_open) return
      if (count(values == low) == 0) return
    end if
    do pass = 2, 3
      do iy = 1 - hy, ny + hy
        do ix = 1 - hx, nx + hx
          if (pass == 2 .and. ieee_is_finite(values(ix, iy))) cycle
          if (pass == 3 .and. values(ix, iy) >= low .and. values(ix, iy) <= high &
              .and. .not. (low_open .and. values(ix, iy) == low)) cycle
          status = pass
          if (slot > 0) then
            write (index, '("(", i0, ", ", i0, ", ", i0, ")")') ix, iy, slot
            text = argument // trim(index) // ' (' // field // ')'
          else
            write (index, '("(", i0, ", ", i0, ")")') ix, iy
            text = argument // trim(index)
          end if
          text = trim(text) // ' = ' // trim({p}_number_text(values(ix, iy)))
          if (pass == 2) then
            message = trim(text) // ': not finite'
          else
            message = trim(text) // ': outside ' // trim(interval)
          end if
          return
        end do
      end do
    end do
  end subroutine {p}_check_plane
""", ("number_text",)),
}


def features_module_text(prefix, recipe, column_names, layer_paths=False):
    """Fortran 2008 source of module ``NAME_features``: the host features of a model.

    Parameters
    ----------
    prefix : str
        The model's Fortran name ``NAME`` (:func:`surrogate3d.export.fortran.fortran_name`,
        e.g. ``"boosted"``): lower case letters, digits and ``_``, starting with a letter,
        at most 40 characters.
    recipe : surrogate3d.pairs.recipe.FeatureRecipe
        The model's feature recipe (features and parameters; radii and distances in m).
    column_names : sequence of str
        The model's feature columns in order (names of ``recipe.column_names()``): the
        rows of the generated ``features`` array.
    layer_paths : bool
        Also make public ``NAME_slant_depth_above`` and its reach ``NAME_path_reach``
        (:mod:`surrogate3d.export.fortran_slant`): the optical depth along the path from
        every layer's middle toward the sun, which the heating-rate layers of the host
        interface need.

    Returns
    -------
    str
        The module's source (``NAME_features.f90``); see the module docstring of
        :mod:`surrogate3d.export.fortran_features` for its interface and status codes.

    Raises
    ------
    surrogate3d.errors.ValidationError
        A prefix that is no Fortran name, no columns, a column the recipe does not make
        (or one listed twice), or a feature neither this module nor
        :mod:`surrogate3d.export.fortran_slant` implements (named).

    Examples
    --------
    >>> from surrogate3d.pairs.recipe import FeatureRecipe
    >>> recipe = FeatureRecipe(["cloud_fraction", "neighbour_mean_cloud_fraction"], {"neighbour_radii": [2000.0]})
    >>> text = features_module_text("demo", recipe, recipe.column_names())
    >>> [line for line in text.splitlines() if line.startswith("module")]
    ['module demo_features']
    >>> "integer, parameter :: demo_n_host_features = 2" in text
    True
    """
    _check_prefix(prefix)
    columns = _columns(recipe, column_names)
    features = {feature for _, feature, _ in columns}
    slant = _slant_generator(features)
    slant_needed = features - IMPLEMENTED_FEATURES
    generator = slant
    if layer_paths:
        from . import fortran_slant as generator
        slant_needed = slant_needed | {generator.SLANT_DEPTH_ABOVE}
    declarations = generator.slant_declarations(prefix, slant_needed) if slant_needed else ""
    helpers = {"number_text", "check_layers", "check_plane", "set_feature"} | _helpers_of(features)
    body = [_HEADER.format(p=prefix, recipe=" ".join(str(recipe.name).split())[:60], n=len(columns),
                           names=_names_parameter(f"{prefix}_column_names", [name for name, _, _ in columns]),
                           declarations=declarations.rstrip("\n") + "\n" if declarations.strip() else ""),
            _halo_needed(prefix),
            _feature_reach(prefix, recipe, columns, slant),
            _check_geometry(prefix, _reads(features)),
            _host_features(prefix, recipe, columns, slant)]
    body += [_HELPERS[name][0].format(p=prefix) for name in _with_dependencies(helpers)]
    if slant_needed:
        body.append(generator.slant_procedures(prefix, slant_needed).rstrip("\n") + "\n")
    text = "\n".join(body) + f"end module {prefix}_features\n"
    text = "".join(_fit(line) + "\n" for line in text.splitlines())
    long = [line for line in text.splitlines() if len(line) >= _LINE_LIMIT]
    if long:
        raise ValidationError(f"generated Fortran has a line of {len(long[0])} characters (limit {_LINE_LIMIT - 1}): "
                              f"{long[0][:60]}...")
    return text


def _fit(line):
    """A statement line below the line limit: broken after a comma or before ``//`` outside character
    literals (a long prefix makes long lines), continued four columns further in."""
    if len(line) < _LINE_LIMIT or line.lstrip().startswith("!"):
        return line
    indent = " " * (len(line) - len(line.lstrip()) + 4)
    quote, cut = None, None
    for i, char in enumerate(line[:_LINE_LIMIT - 3]):
        if quote:
            quote = None if char == quote else quote
        elif char in "'\"":
            quote = char
        elif i > len(indent) and char == ",":
            cut = i + 1
        elif i > len(indent) and line.startswith("//", i):
            cut = i
    if cut is None:
        return line
    rest = line[cut:].lstrip()
    return line[:cut].rstrip() + " &\n" + _fit(indent + rest)


def _check_prefix(prefix):
    """Refuse a prefix that is no Fortran name or is too long for the generated names."""
    if not isinstance(prefix, str) or not re.fullmatch(r"[a-z][a-z0-9_]*", prefix) or len(prefix) > _PREFIX_LIMIT:
        raise ValidationError(f"prefix must be a Fortran name (lower case letters, digits and _, starting with a "
                              f"letter, at most {_PREFIX_LIMIT} characters); got {prefix!r}")


def _columns(recipe, column_names):
    """``(column name, feature, radius or None)`` for each requested column, in the requested order."""
    made = {}
    for feature in recipe.features:
        radii = recipe.parameters["neighbour_radii"] if FEATURES[feature].per_radius else [None]
        for radius in radii:
            made[column_name(feature, radius)] = (feature, None if radius is None else float(radius))
    names = _checked_column_names(column_names, made, f"which recipe {recipe.name!r} does not make; its columns")
    return [(name, *made[name]) for name in names]


def _checked_column_names(column_names, known, unknown_text):
    """The requested feature columns as a list: ValidationError if there are none, if one is not in
    ``known`` (``unknown_text`` says why, the known ones follow) or if one is listed twice."""
    names = list(column_names)
    if not names:
        raise ValidationError("column_names is empty: a features module needs at least one feature column")
    unknown = [name for name in names if name not in known]
    if unknown:
        raise ValidationError(f"column_names has {unknown}, {unknown_text}: {', '.join(known)}")
    twice = sorted({name for name in names if names.count(name) > 1})
    if twice:
        raise ValidationError(f"column_names lists {twice} more than once")
    return names


def _slant_generator(features):
    """The slant-path generator module when some feature needs it; ValidationError naming what nobody implements."""
    wanted = sorted(features - IMPLEMENTED_FEATURES)
    if not wanted:
        return None
    try:
        from . import fortran_slant
    except ImportError:
        fortran_slant = None
    available = getattr(fortran_slant, "SLANT_FEATURES", frozenset())
    missing = [name for name in wanted if name not in available]
    if missing:
        raise ValidationError(f"no Fortran implementation of feature(s) {missing}: surrogate3d.export.fortran_features "
                              "writes " + ", ".join(sorted(IMPLEMENTED_FEATURES)) + "; the slant-path generator "
                              + ("surrogate3d.export.fortran_slant is not installed" if fortran_slant is None
                                 else "surrogate3d.export.fortran_slant writes " + ", ".join(sorted(available))))
    return fortran_slant


def _reads(features):
    """Host-field keys the features read (the feature registry's ``keys``)."""
    keys = set()
    for feature in features:
        keys.update(FEATURES[feature].keys)
    return keys


def _helpers_of(features):
    """Names of the helper procedures the features' statements call directly."""
    needed = set()
    if features & set(_LOG_TAU):
        needed.add("log_tau")
    if features & set(_EXTENT):
        needed.add("cloud_extent")
    if any(FEATURES[f].per_radius for f in features):
        needed.update({"window_mean", "cells"})
    if "cloud_edge_distance" in features:
        needed.update({"edge_distance", "cells"})
    if features & {"log_optical_depth_gradient_along_beam", "log_optical_depth_gradient_across_beam"}:
        needed.add("gradient")
    if "cloud_top_height_upsun_minus_downsun" in features:
        needed.add("cloud_top_sides")
    return needed


def _with_dependencies(names, helpers=None):
    """The helpers and those they call, in the order of ``helpers`` (name -> (text, helpers it
    calls); default :data:`_HELPERS`)."""
    helpers = _HELPERS if helpers is None else helpers
    closed, pending = set(), list(names)
    while pending:
        name = pending.pop()
        if name not in closed:
            closed.add(name)
            pending.extend(helpers[name][1])
    return [name for name in helpers if name in closed]


def _names_parameter(name, values):
    """A character parameter array of names, one per line."""
    width = max(len(v) for v in values)
    rows = ", &\n".join(f'       "{v}"' for v in values)
    return f"  character(len={width}), parameter :: {name}(*) = [character(len={width}) :: &\n{rows}]"


def _real(value):
    """A Fortran real64 literal that reads back as the same double."""
    text = repr(float(value))
    if "." not in text and "e" not in text:
        text += ".0"
    return f"{text}_real64"


def _halo_needed(prefix):
    """``NAME_halo_needed``: the largest reach over the feature columns."""
    return f"""\
  ! The halo (columns along x and along y) the features need for this geometry (and cap), -1 for a
  ! geometry {prefix}_host_features refuses (status 2, 3 or 4).
  pure subroutine {prefix}_halo_needed(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, &
        hx_needed, hy_needed, slant_path_reach)
    integer, intent(in) :: nz
    real(real64), intent(in) :: z_edge(nz + 1), dx, dy, solar_zenith_angle, solar_beam_azimuth
    integer, intent(out) :: hx_needed, hy_needed
    ! The host's cap [m] on the slant paths' horizontal travel, as in {prefix}_host_features.
    real(real64), intent(in), optional :: slant_path_reach
    integer :: reach_x({prefix}_n_host_features), reach_y({prefix}_n_host_features)
    call {prefix}_feature_reach(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, &
        reach_x, reach_y, slant_path_reach)
    hx_needed = maxval(reach_x)
    hy_needed = maxval(reach_y)
  end subroutine {prefix}_halo_needed
"""


def _reach_statements(prefix, recipe, feature, radius, slant):
    """Fortran statements setting ``reach_x(j)``, ``reach_y(j)`` for one column (``runtime/halo.py``'s REACH)."""
    parameters = recipe.parameters
    if FEATURES[feature].per_radius:
        r = _real(radius)
        return [f"reach_x(j) = {prefix}_cells({r}, dx)", f"reach_y(j) = {prefix}_cells({r}, dy)"]
    if feature == "cloud_edge_distance":
        cap = _real(parameters["edge_distance_cap"])
        return [f"reach_x(j) = {prefix}_cells({cap}, dx)", f"reach_y(j) = {prefix}_cells({cap}, dy)"]
    if feature in ("log_optical_depth_gradient_along_beam", "log_optical_depth_gradient_across_beam"):
        return ["reach_x(j) = 1", "reach_y(j) = 1"]
    if feature == "cloud_top_height_upsun_minus_downsun":
        # Bilinear samples at +-d along the beam read cells floor(|s|) and floor(|s|) + 1.
        d = _real(parameters["cloud_side_distance"])
        # Capped at 10^9 columns so that a tiny column size cannot overflow the integer.
        return [f"reach_x(j) = floor(min(abs({d} * cos(solar_beam_azimuth * {prefix}_degree)) / dx, 1.0e9_real64)) + 1",
                f"reach_y(j) = floor(min(abs({d} * sin(solar_beam_azimuth * {prefix}_degree)) / dy, 1.0e9_real64)) + 1"]
    if feature not in IMPLEMENTED_FEATURES:
        return [*_indented(slant.slant_reach_call(prefix, feature, "rx", "ry", reach="slant_path_reach"), ""),
                "reach_x(j) = rx",
                "reach_y(j) = ry"]
    return []


def _feature_reach(prefix, recipe, columns, slant):
    """``NAME_feature_reach``: the reach of every feature column, -1 for a refused geometry."""
    lines = []
    for j, (name, feature, radius) in enumerate(columns, start=1):
        statements = _reach_statements(prefix, recipe, feature, radius, slant)
        if statements:
            lines += [f"    ! {name}", f"    j = {j}"] + [f"    {s}" for s in statements]
    uses_j = bool(lines)
    uses_slant = any(feature not in IMPLEMENTED_FEATURES for _, feature, _ in columns)
    declarations = ["    integer :: status", "    character(len=1) :: message"]
    if uses_j:
        declarations.append("    integer :: j")
    if uses_slant:
        declarations.append("    integer :: rx, ry")
    return f"""\
  ! Columns each feature column reads along x and y (surrogate3d.runtime.halo.feature_reach, the
  ! slant paths capped at slant_path_reach [m] if present); -1 everywhere for a geometry
  ! {prefix}_host_features refuses.
  pure subroutine {prefix}_feature_reach(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, &
        reach_x, reach_y, slant_path_reach)
    integer, intent(in) :: nz
    real(real64), intent(in) :: z_edge(nz + 1), dx, dy, solar_zenith_angle, solar_beam_azimuth
    integer, intent(out) :: reach_x({prefix}_n_host_features), reach_y({prefix}_n_host_features)
    real(real64), intent(in), optional :: slant_path_reach
{_text(declarations)}    status = 0
    call {prefix}_check_geometry(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, &
        status, message, slant_path_reach)
    if (status /= 0) then
      reach_x = -1
      reach_y = -1
      return
    end if
    reach_x = 0
    reach_y = 0
{_text(lines)}  end subroutine {prefix}_feature_reach
"""


def _check_geometry(prefix, keys):
    """``NAME_check_geometry``: column sizes, sun angles and (when the recipe reads them) the layer edges."""
    reads_z_edge = "z_edge" in keys or any(k in keys for k in _LAYERS)
    return f"""\
  ! Status 2 or 3 for dx, dy not finite or not positive, 4 for an impossible sun angle, 3 for a
  ! cap slant_path_reach (if present) negative or not finite, 2 or 3 for layer edges not finite or
  ! not strictly increasing (when the recipe reads them).
  pure subroutine {prefix}_check_geometry(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, &
        status, message, slant_path_reach)
    integer, intent(in) :: nz
    real(real64), intent(in) :: z_edge(nz + 1), dx, dy, solar_zenith_angle, solar_beam_azimuth
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    real(real64), intent(in), optional :: slant_path_reach
    logical, parameter :: reads_z_edge = {'.true.' if reads_z_edge else '.false.'}
    character(len=400) :: text
    integer :: k
    if (status /= 0) return
    if (.not. (ieee_is_finite(dx) .and. ieee_is_finite(dy))) then
      status = 2
      text = 'dx = ' // trim({prefix}_number_text(dx)) // ', dy = ' // trim({prefix}_number_text(dy)) // &
          ' m: must be finite'
    else if (dx <= 0.0_real64 .or. dy <= 0.0_real64) then
      status = 3
      text = 'dx = ' // trim({prefix}_number_text(dx)) // ', dy = ' // trim({prefix}_number_text(dy)) // &
          ' m: must be > 0'
    else if (.not. (ieee_is_finite(solar_zenith_angle) .and. solar_zenith_angle >= 0.0_real64 &
                    .and. solar_zenith_angle < 90.0_real64)) then
      status = 4
      text = 'solar_zenith_angle = ' // trim({prefix}_number_text(solar_zenith_angle)) // &
          ' degree: must be in [0, 90) (the sun above the horizon)'
    else if (.not. ieee_is_finite(solar_beam_azimuth)) then
      status = 4
      text = 'solar_beam_azimuth = ' // trim({prefix}_number_text(solar_beam_azimuth)) // ' degree: must be finite'
    else if ({prefix}_bad_cap(slant_path_reach)) then
      status = 3
      text = 'slant_path_reach = ' // trim({prefix}_number_text(slant_path_reach)) // &
          ' m: must be finite and >= 0 (or absent: no cap)'
    else if (reads_z_edge) then
      do k = 1, nz + 1
        if (.not. ieee_is_finite(z_edge(k))) then
          status = 2
          write (text, '("z_edge(", i0, ") = ", a, " m: not finite")') k, trim({prefix}_number_text(z_edge(k)))
          exit
        end if
        if (k > 1) then
          if (z_edge(k) <= z_edge(k - 1)) then
            status = 3
            write (text, '("z_edge(", i0, ") = ", a, " m: layer edges must be strictly increasing")') &
                k, trim({prefix}_number_text(z_edge(k)))
            exit
          end if
        end if
      end do
    end if
    if (status /= 0) message = text
  end subroutine {prefix}_check_geometry

  ! Whether a cap is present and negative or not finite.
  pure logical function {prefix}_bad_cap(slant_path_reach)
    real(real64), intent(in), optional :: slant_path_reach
    {prefix}_bad_cap = .false.
    if (present(slant_path_reach)) {prefix}_bad_cap = .not. (ieee_is_finite(slant_path_reach) &
        .and. slant_path_reach >= 0.0_real64)
  end function {prefix}_bad_cap
"""


def _text(lines):
    """Lines of Fortran as text, each ending in a newline ("" for none)."""
    return "".join(line + "\n" for line in lines)


def _indented(text, indent):
    """Fortran text from another generator (one statement or several lines) as lines, indented alike."""
    return [indent + line for line in textwrap.dedent(text.strip("\n")).splitlines() if line.strip()]


def _flux_slot(flux):
    """1-based plane of ``independent_column_fluxes`` holding a flux (the order of TARGETS)."""
    return TARGETS.index(flux) + 1


def _window_field(feature):
    """The block array (Fortran expression) whose neighbourhood mean a per-radius feature reads."""
    field = {"neighbour_mean_cloud_fraction": "total_cloud_fraction",
             "neighbour_contrast_cloud_fraction": "total_cloud_fraction",
             "neighbour_mean_log_optical_depth": "log_tau",
             "neighbour_contrast_log_optical_depth": "log_tau"}.get(feature)
    if field is None:   # neighbour_excess_independent_column_<flux>
        field = f"independent_column_fluxes(:, :, {_flux_slot(feature[len('neighbour_excess_independent_column_'):])})"
    return field


def _windows(columns):
    """``{(field, radius): plane}``: the neighbourhood means the columns read, each once (planes from 1)."""
    windows = {}
    for _, feature, radius in columns:
        if FEATURES[feature].per_radius:
            windows.setdefault((_window_field(feature), radius), len(windows) + 1)
    return windows


def _column_statements(prefix, recipe, feature, radius, slant, windows, priors, depths):
    """Fortran statements filling ``column(nx, ny)`` with one feature column of the own columns, the
    neighbourhood means, direct-beam priors and paired slant depths taken from the planes of
    ``windows(nx, ny, :)``, ``priors(nx, ny, :)`` and ``slant_depths(nx, ny, :)`` (``windows``, ``priors``,
    ``depths``: which plane holds what)."""
    p, own = prefix, "(1:nx, 1:ny)"
    parameters = recipe.parameters
    if feature.startswith("independent_column_"):
        flux = feature[len("independent_column_"):]
        if flux == "surface_downward_flux":
            return [f"column = independent_column_fluxes(1:nx, 1:ny, {_flux_slot('surface_downward_direct_flux')}) &",
                    f"    + independent_column_fluxes(1:nx, 1:ny, {_flux_slot('surface_downward_diffuse_flux')})"]
        return [f"column = independent_column_fluxes(1:nx, 1:ny, {_flux_slot(flux)})"]
    simple = {
        "cos_solar_zenith": f"column = cos(solar_zenith_angle * {p}_degree)",
        "surface_albedo": f"column = surface_albedo{own}",
        "log_column_optical_depth": f"column = log_tau{own}",
        "cloud_fraction": f"column = total_cloud_fraction{own}",
        "cloud_top_height": f"column = top{own}",
        "cloud_base_height": f"column = base{own}",
        "cloud_top_shadow_length": f"column = top{own} * tan(solar_zenith_angle * {p}_degree)",
        "cloud_edge_length": f"column = cloud_edge_length{own}",
    }
    if feature in simple:
        return [simple[feature]]
    if feature == "column_optical_depth_relative_std":
        return [f"where (column_optical_depth_mean{own} > 0.0_real64)",
                f"  column = column_optical_depth_std{own} / column_optical_depth_mean{own}",
                "elsewhere", "  column = 0.0_real64", "end where"]
    if FEATURES[feature].per_radius:
        field = _window_field(feature)
        mean = f"windows(:, :, {windows[(field, radius)]})"
        if "_mean_" in feature:
            return [f"column = {mean}"]
        if "_contrast_" in feature:
            return [f"column = {field}{own} - {mean}"]
        return [f"column = {mean} - {field.replace('(:, :, ', '(1:nx, 1:ny, ')}"]
    if feature in priors:
        return [f"column = priors(:, :, {priors[feature]})"]
    if feature in depths:
        return [f"column = slant_depths(:, :, {depths[feature]})"]
    if feature == "cloud_edge_distance":
        return [f"call {p}_edge_distance(total_cloud_fraction, nx, ny, hx, hy, dx, dy, "
                f"{_real(parameters['edge_cloud_fraction'])}, {_real(parameters['edge_distance_cap'])}, column)"]
    if feature in ("log_optical_depth_gradient_along_beam", "log_optical_depth_gradient_across_beam"):
        across = ".true." if feature.endswith("across_beam") else ".false."
        return [f"call {p}_gradient(log_tau, nx, ny, hx, hy, dx, dy, solar_beam_azimuth, {across}, column)"]
    if feature == "cloud_top_height_upsun_minus_downsun":
        return [f"call {p}_cloud_top_sides(top, nx, ny, hx, hy, dx, dy, solar_beam_azimuth, "
                f"{_real(parameters['cloud_side_distance'])}, column)"]
    return _indented(slant.slant_call(prefix, feature, "column", reach="slant_path_reach"), "")


def _field_checks(prefix, keys):
    """Declarations of which fields are read, and the calls checking them (a call per argument: every
    argument is referenced, the unread ones behind a false constant)."""
    flags, calls = [], []
    for name, (high, interval) in _LAYERS.items():
        flags.append(f"    logical, parameter :: reads_{name} = {'.true.' if name in keys else '.false.'}")
        calls.append(f"    if (reads_{name}) then\n      call {prefix}_check_layers('{name}', {name}, &\n"
                     f"          nx, ny, nz, hx, hy, 0.0_real64, {high}, .false., '{interval}', status, message)\n"
                     "    end if")
    for name, (high, interval) in _PLANES.items():
        flags.append(f"    logical, parameter :: reads_{name} = {'.true.' if name in keys else '.false.'}")
        calls.append(f"    if (reads_{name}) then\n      call {prefix}_check_plane('{name}', 0, '', {name}, &\n"
                     f"          nx, ny, hx, hy, 0.0_real64, {high}, .false., '{interval}', status, message)\n"
                     "    end if")
    reads_flux = ", ".join(".true." if f"independent_column_{flux}" in keys else ".false." for flux in TARGETS)
    flags.append(f"    logical, parameter :: reads_flux({len(TARGETS)}) = [{reads_flux}]")
    calls.append(f"""\
    do j = 1, {len(TARGETS)}
      if (reads_flux(j)) then
        call {prefix}_check_plane('independent_column_fluxes', j, trim(flux_names(j)), &
            independent_column_fluxes(:, :, j), nx, ny, hx, hy, -huge(1.0_real64), huge(1.0_real64), .false., &
            '(-inf, inf)', status, message)
      end if
    end do""")
    width = max(len(f) for f in TARGETS)
    names = ", &\n".join(f'        "{f}"' for f in TARGETS)
    flags.append(f"    character(len={width}), parameter :: flux_names({len(TARGETS)}) = [character(len={width}) :: &\n"
                 f"{names}]")
    return "\n".join(flags), "\n".join(calls)


def _host_features(prefix, recipe, columns, slant):
    """``NAME_host_features``: checks, derived block arrays, then one feature column at a time."""
    p = prefix
    features = {feature for _, feature, _ in columns}
    # The slant-path procedures of the other generator need not be pure.
    purity = "pure " if slant is None else ""
    flags, checks = _field_checks(prefix, _reads(features))
    derived, declarations = [], []
    if features & set(_LOG_TAU):
        declarations.append("    real(real64), allocatable :: log_tau(:, :)")
        derived += ["    allocate (log_tau(1-hx:nx+hx, 1-hy:ny+hy))",
                    f"    call {p}_log_tau(layer_optical_depth, nx, ny, nz, hx, hy, log_tau)"]
    if features & set(_EXTENT):
        declarations.append("    real(real64), allocatable :: top(:, :), base(:, :)")
        derived += ["    allocate (top(1-hx:nx+hx, 1-hy:ny+hy), base(1-hx:nx+hx, 1-hy:ny+hy))",
                    f"    call {p}_cloud_extent(layer_cloud_fraction, z_edge, nx, ny, nz, hx, hy, "
                    f"{_real(recipe.parameters['layer_cloud_fraction_threshold'])}, top, base)"]
    windows = _windows(columns)
    if windows:
        # Every neighbourhood mean once, however many columns read it.
        declarations.append("    real(real64), allocatable :: windows(:, :, :)")
        derived.append(f"    allocate (windows(nx, ny, {len(windows)}))")
        derived += [f"    call {p}_window_mean({field}, nx, ny, hx, hy, {_real(radius)}, dx, dy, windows(:, :, {w}))"
                    for (field, radius), w in windows.items()]
    prior_features = [feature for feature in slant.PRIOR_FEATURES if feature in features] if slant else []
    priors = {feature: j for j, feature in enumerate(sorted(prior_features), start=1)}
    if priors:
        # The direct-beam priors in one pass: the prior along the paths is computed once for all of them.
        declarations.append("    real(real64), allocatable :: priors(:, :, :)")
        derived.append(f"    allocate (priors(nx, ny, {len(priors)}))")
        derived += _indented(slant.slant_priors_call(prefix, {f: f"priors(:, :, {j})" for f, j in priors.items()},
                                                     reach="slant_path_reach"), "    ")
    depths = {}
    if slant and set(_SLANT_DEPTH_PAIR) <= features:
        # Both slant depths from one pass over the paths.
        depths = {feature: j for j, feature in enumerate(_SLANT_DEPTH_PAIR, start=1)}
        declarations.append("    real(real64), allocatable :: slant_depths(:, :, :)")
        derived.append("    allocate (slant_depths(nx, ny, 2))")
        derived += _indented(slant.slant_depth_pair_call(prefix, "slant_depths(:, :, 1)", "slant_depths(:, :, 2)",
                                                         reach="slant_path_reach"), "    ")
    statements = []
    for j, (name, feature, radius) in enumerate(columns, start=1):
        statements.append(f"    ! {name}")
        statements += [f"    {s}" for s in _column_statements(prefix, recipe, feature, radius, slant, windows, priors,
                                                               depths)]
        statements.append(f"    call {p}_set_feature(features, {j}, nx * ny, column)")
    return f"""\
  ! Features of the nx x ny own columns from fields on the own columns and a halo of hx, hy
  ! columns (the block periodic); status and message as in the module's header.
  {purity}subroutine {p}_host_features(nx, ny, nz, hx, hy, dx, dy, solar_zenith_angle, &
      solar_beam_azimuth, z_edge, layer_cloud_fraction, layer_optical_depth, &
      layer_clear_sky_optical_depth, surface_albedo, total_cloud_fraction, column_optical_depth_mean, &
      column_optical_depth_std, cloud_edge_length, independent_column_fluxes, features, status, message, &
      slant_path_reach)
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: dx, dy, solar_zenith_angle, solar_beam_azimuth
    real(real64), intent(in) :: z_edge(nz + 1)
    real(real64), intent(in), dimension(1-hx:nx+hx, 1-hy:ny+hy, nz) :: layer_cloud_fraction, &
        layer_optical_depth, layer_clear_sky_optical_depth
    real(real64), intent(in), dimension(1-hx:nx+hx, 1-hy:ny+hy) :: surface_albedo, total_cloud_fraction, &
        column_optical_depth_mean, column_optical_depth_std, cloud_edge_length
    real(real64), intent(in) :: independent_column_fluxes(1-hx:nx+hx, 1-hy:ny+hy, {len(TARGETS)})
    real(real64), intent(out) :: features({p}_n_host_features, nx * ny)
    integer, intent(out) :: status
    character(len=*), intent(out) :: message
    ! The host's cap [m] on the slant paths' horizontal travel (surrogate3d.core.slant_path); absent: none.
    real(real64), intent(in), optional :: slant_path_reach
    ! The fields the recipe's features read: only these are checked and read.
{flags}
    integer :: reach_x({p}_n_host_features), reach_y({p}_n_host_features), j, worst, short
    real(real64), allocatable :: column(:, :)
{_text(declarations)}    character(len=400) :: text
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
    call {p}_check_geometry(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, &
        status, message, slant_path_reach)
    if (status /= 0) return
    ! The halo: the first of the columns with the largest reach beyond it is named.
    call {p}_feature_reach(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, &
        reach_x, reach_y, slant_path_reach)
    worst = 0
    short = 0
    do j = 1, {p}_n_host_features
      if (reach_x(j) <= hx .and. reach_y(j) <= hy) cycle
      short = short + 1
      if (worst == 0) then
        worst = j
      else if (max(reach_x(j), reach_y(j)) > max(reach_x(worst), reach_y(worst))) then
        worst = j
      end if
    end do
    if (worst > 0) then
      status = 1
      write (text, '("feature ", a, " reads ", i0, " columns along x and ", i0, " along y; the halo has ", i0, &
          &" and ", i0, " (", i0, " feature column(s) need more; ", a, " gives what the recipe needs)")') &
          trim({p}_column_names(worst)), reach_x(worst), reach_y(worst), hx, hy, short, '{p}_halo_needed'
      message = text
      return
    end if
{checks}
    if (status /= 0) return
{_text(derived)}    allocate (column(nx, ny))
{_text(statements)}  end subroutine {p}_host_features
"""
