"""Fortran 2008 text of the slant-path features of the generated ``NAME_features`` module.

The features that read the columns a path toward the sun crosses (issue 22, the
contract of ``fortran_features.py``): the slant optical depth, the direct-beam prior and
the direct-beam interception of tilted columns, with the numpy reference
:mod:`surrogate3d.pairs.features` and the geometry of
:mod:`surrogate3d.core.slant_path`; and the optical depth along the path from every
layer's middle toward the sun (:func:`surrogate3d.pairs.profiles.slant_optical_depth_above`)
that heating-rate models read.  The generated procedures repeat numpy's arithmetic in
numpy's order (the same cuts, sums and products), so they agree with it to round-off.

Each feature procedure works on the own columns ``(1:nx, 1:ny)`` of fields with a halo
(``1-hx:nx+hx`` along x, ``1-hy:ny+hy`` along y) and reads the neighbours at their
offsets: the caller checks that the halo covers the feature's reach
(:func:`slant_reach_call`, equal to :data:`surrogate3d.runtime.halo.REACH`).  The
path weights are computed once per call; the work of one column is ``pure`` and
writes no module variable, so the column loops may run under OpenMP.  The text needs
``real64`` of ``iso_fortran_env`` in the enclosing module.

Every procedure that follows the paths, and every reach procedure, takes an optional
last argument ``slant_path_reach`` [m], the host's cap on the paths' horizontal travel
(:func:`surrogate3d.core.slant_path.path_weights` with ``reach``): above the height
where the travel reaches it the paths rise vertically.  Absent, there is no cap; a cap
negative or not finite makes the reach ``huge()`` (no halo suffices).  The statements of
:func:`slant_call`, :func:`slant_priors_call` and :func:`slant_reach_call` pass it when
given the Fortran expression of the cap.
"""

import inspect

from ..errors import ParameterError
from ..core.slant_path import _DIRECTION_EPS, area_path_weights
from ..pairs.features import STAIRCASE_TO_EUCLIDEAN

#: Feature names (:data:`surrogate3d.pairs.features.FEATURES`) the generated Fortran computes.
SLANT_FEATURES = frozenset({
    "slant_optical_depth", "slant_minus_vertical_optical_depth",
    "direct_beam_prior", "direct_beam_prior_minus_independent_column", "direct_beam_prior_slant_minus_vertical",
    "direct_beam_interception_tilted", "direct_beam_interception_tilted_minus_vertical",
    "direct_beam_interception_relative_change",
})

#: The direct-beam priors, which :func:`slant_priors_call` computes together, and the keyword of each in the call.
_PRIOR_KEYWORD = {"direct_beam_prior": "prior",
                  "direct_beam_prior_minus_independent_column": "minus_independent_column",
                  "direct_beam_prior_slant_minus_vertical": "slant_minus_vertical"}

#: Features of :data:`SLANT_FEATURES` that :func:`slant_priors_call` computes in one pass.
PRIOR_FEATURES = frozenset(_PRIOR_KEYWORD)

#: Name of the per-layer optical depth above (not a column feature) in ``needed`` and :func:`slant_reach_call`.
SLANT_DEPTH_ABOVE = "slant_optical_depth_above"

#: Which weights a feature follows: the single path from the column's centre or the area its paths sweep.
_FAMILY = {"slant_optical_depth": "path", "slant_minus_vertical_optical_depth": "path",
           "direct_beam_prior": "prior", "direct_beam_prior_minus_independent_column": "prior",
           "direct_beam_prior_slant_minus_vertical": "prior",
           "direct_beam_interception_tilted": "interception",
           "direct_beam_interception_tilted_minus_vertical": "interception",
           "direct_beam_interception_relative_change": "interception",
           SLANT_DEPTH_ABOVE: "depth_above"}

#: Reach procedure of each family (halo.py: _path, _area and _area_twice).
_REACH = {"path": "path_reach", "depth_above": "path_reach", "prior": "area_reach",
          "interception": "area_twice_reach"}

#: The sub-layer step [columns] of the area weights, as the features call area_path_weights.
_AREA_MAX_STEP = inspect.signature(area_path_weights).parameters["max_step"].default

_GEOMETRY_ARGS = "nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth"
_CALL_HEAD = "nx, ny, nz, hx, hy, dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge"


#: Generated lines stay this short, so that the 132-character limit of free form holds with the
#: indentation an assembler adds.
_WRAP = 120


def _break_at(line, limit):
    """Index of the last space outside character literals before ``limit``, preferring one after a comma."""
    quote, spaces = None, []
    for i, char in enumerate(line[:limit]):
        if quote:
            quote = None if char == quote else quote
        elif char in "'\"":
            quote = char
        elif char == " " and line[:i].strip():
            spaces.append(i)
    after_comma = [i for i in spaces if line[i - 1] == ","]
    return (after_comma or spaces)[-1]


def _wrapped(text):
    """Fortran text with every line longer than :data:`_WRAP` continued (``&``) on the next lines."""
    out = []
    for line in text.split("\n"):
        while len(line) > _WRAP:
            indent = line[:len(line) - len(line.lstrip())]
            marker = line.lstrip().split(" ", 1)[0] if line.lstrip().startswith("!") else None
            cut = _break_at(line, _WRAP - 2)
            if marker:
                out.append(line[:cut])
                line = f"{indent}{marker} {line[cut:].lstrip()}"
            else:
                out.append(line[:cut] + " &")
                line = f"{indent}    {line[cut:].lstrip()}"
        out.append(line)
    return "\n".join(out)


def _real(value):
    return f"{float(value)!r}_real64"


def _family(feature, allowed):
    if feature not in allowed:
        raise ParameterError(f"feature {feature!r} has no slant-path Fortran; known: {sorted(allowed)}")
    return _FAMILY[feature]


def _families(needed):
    allowed = SLANT_FEATURES | {SLANT_DEPTH_ABOVE}
    return {_family(name, allowed) for name in needed}


#: Local parameters of the procedures: radians per degree, and the constant of slant_path.py below which a
#: direction component is zero.
_DEGREE = "    real(real64), parameter :: degree = 3.141592653589793_real64 / 180.0_real64"
_DIRECTION = ("    ! Below this a direction component is taken as exactly zero (cos(90 deg) is 6e-17, not 0).\n"
              f"    real(real64), parameter :: direction_eps = {_real(_DIRECTION_EPS)}")


def _type_declaration(p):
    return f"""\
  !> Slant-path weights (surrogate3d.core.slant_path) of n_layer layers, in two forms. By layer: the
  !> entries first(k):first(k + 1) - 1 give, in (oy, ox) order, the offsets of the columns met in layer k
  !> and the share of the layer's path (or swept area) in each. By offset (slant_path.slant_sum): group g,
  !> at offset (group_oy(g), group_ox(g)), has the terms group_first(g):group_first(g + 1) - 1, each a
  !> layer and its weight, groups in the order their offsets first appear going up.
  type :: {p}_slant_weights
    integer, allocatable :: first(:), oy(:), ox(:)
    real(real64), allocatable :: weight(:)
    integer, allocatable :: group_first(:), group_oy(:), group_ox(:), term_layer(:)
    real(real64), allocatable :: term_weight(:)
  end type {p}_slant_weights"""


def _common_procedures(p):
    """Sorting, the largest offsets and the test of a finite reach: every family uses them."""
    return f"""
  !> Sorts the entries (oy, ox, weight) by oy, then ox (insertion sort: the lists are short).
  pure subroutine {p}_slant_sort_entries(n, oy, ox, weight)
    integer, intent(in) :: n
    integer, intent(inout) :: oy(n), ox(n)
    real(real64), intent(inout) :: weight(n)
    integer :: i, j, key_y, key_x
    real(real64) :: key_w
    do i = 2, n
      key_y = oy(i)
      key_x = ox(i)
      key_w = weight(i)
      j = i - 1
      do while (j >= 1)
        if (oy(j) < key_y .or. (oy(j) == key_y .and. ox(j) <= key_x)) exit
        oy(j + 1) = oy(j)
        ox(j + 1) = ox(j)
        weight(j + 1) = weight(j)
        j = j - 1
      end do
      oy(j + 1) = key_y
      ox(j + 1) = key_x
      weight(j + 1) = key_w
    end do
  end subroutine {p}_slant_sort_entries

  !> The farthest column offsets along x and y of the weights (runtime.halo._largest_offsets).
  pure subroutine {p}_slant_largest_offsets(paths, rx, ry)
    type({p}_slant_weights), intent(in) :: paths
    integer, intent(out) :: rx, ry
    rx = max(0, maxval(abs(paths%ox)))
    ry = max(0, maxval(abs(paths%oy)))
  end subroutine {p}_slant_largest_offsets

  !> Whether the geometry has a finite reach: the sun above the horizon, a cap of the paths' horizontal
  !> travel (slant_path_reach [m], if present) finite and >= 0, and the paths crossing fewer than 1e6 columns
  !> (a lower sun needs a halo no host has; the weights would not fit in memory).
  pure logical function {p}_slant_reachable(nz, z_edge, dx, dy, solar_zenith_angle, slant_path_reach)
    integer, intent(in) :: nz
    real(real64), intent(in) :: z_edge(nz + 1), dx, dy, solar_zenith_angle
    real(real64), intent(in), optional :: slant_path_reach
{_DEGREE}
    real(real64) :: travel
    {p}_slant_reachable = solar_zenith_angle >= 0.0_real64 .and. solar_zenith_angle < 90.0_real64
    if (.not. {p}_slant_reachable) return
    travel = z_edge(nz + 1) * tan(solar_zenith_angle * degree)
    if (present(slant_path_reach)) then
      ! Not (>= 0 and <= huge) is also true for NaN.
      if (.not. (slant_path_reach >= 0.0_real64 .and. slant_path_reach <= huge(slant_path_reach))) then
        {p}_slant_reachable = .false.
        return
      end if
      travel = min(travel, slant_path_reach)
    end if
    {p}_slant_reachable = travel < 1.0e6_real64 * min(dx, dy)
  end function {p}_slant_reachable
"""


def _group_procedure(p):
    """The weights regrouped by column offset (slant_path.gather_offsets), for the sums of slant_sum."""
    return f"""
  !> The weights regrouped by column offset as slant_path.gather_offsets groups them, so that the sums of
  !> slant_path.slant_sum are added in numpy's order.
  pure subroutine {p}_slant_group_offsets(n_layer, paths)
    integer, intent(in) :: n_layer
    type({p}_slant_weights), intent(inout) :: paths
    integer :: group(size(paths%ox)), n_terms(size(paths%ox)), next(size(paths%ox))
    integer :: group_oy(size(paths%ox)), group_ox(size(paths%ox))
    integer :: n_group, e, g, k
    n_group = 0
    do e = 1, size(paths%ox)
      do g = 1, n_group
        if (group_oy(g) == paths%oy(e) .and. group_ox(g) == paths%ox(e)) exit
      end do
      if (g > n_group) then
        n_group = g
        group_oy(g) = paths%oy(e)
        group_ox(g) = paths%ox(e)
        n_terms(g) = 0
      end if
      group(e) = g
      n_terms(g) = n_terms(g) + 1
    end do
    allocate (paths%group_first(n_group + 1), paths%group_oy(n_group), paths%group_ox(n_group), &
              paths%term_layer(size(paths%ox)), paths%term_weight(size(paths%ox)))
    paths%group_oy(:) = group_oy(1:n_group)
    paths%group_ox(:) = group_ox(1:n_group)
    paths%group_first(1) = 1
    do g = 1, n_group
      paths%group_first(g + 1) = paths%group_first(g) + n_terms(g)
    end do
    next(1:n_group) = paths%group_first(1:n_group)
    do k = 1, n_layer
      do e = paths%first(k), paths%first(k + 1) - 1
        g = group(e)
        paths%term_layer(next(g)) = k
        paths%term_weight(next(g)) = paths%weight(e)
        next(g) = next(g) + 1
      end do
    end do
  end subroutine {p}_slant_group_offsets
"""


def _path_procedures(p):
    """The exact path weights (slant_path.path_weights) and their reach (halo._path)."""
    return f"""
  !> The faces lo + 1/2 .. hi + 1/2 (none if hi < lo) where s u / spacing is a half-integer for s between
  !> s0 and s1 [m] (slant_path._crossings); none for a direction component u below direction_eps.
  pure subroutine {p}_slant_crossings(s0, s1, u, spacing, lo, hi)
    real(real64), intent(in) :: s0, s1, u, spacing
    integer, intent(out) :: lo, hi
{_DIRECTION}
    real(real64) :: a, b
    lo = 0
    hi = -1
    if (abs(u) < direction_eps) return
    a = (s0 * u) / spacing
    b = (s1 * u) / spacing
    lo = ceiling(min(a, b) - 0.5_real64)
    hi = floor(max(a, b) - 0.5_real64)
  end subroutine {p}_slant_crossings

  !> Sorts x ascending (insertion sort: the cuts along x and along y come each in order).
  pure subroutine {p}_slant_sort_cuts(n, x)
    integer, intent(in) :: n
    real(real64), intent(inout) :: x(n)
    real(real64) :: key
    integer :: i, j
    do i = 2, n
      key = x(i)
      j = i - 1
      do while (j >= 1)
        if (x(j) <= key) exit
        x(j + 1) = x(j)
        j = j - 1
      end do
      x(j + 1) = key
    end do
  end subroutine {p}_slant_sort_cuts

  !> Path weights of slant_path.path_weights for the n_layer layers between edges(k) and edges(k + 1) [m]:
  !> the columns the straight path from a column's surface centre toward the sun crosses, and the share of
  !> the layer's path length inside each. Exact for uniform columns: the layer's path is cut where it
  !> enters and leaves the layer and at every column face, and each piece lies in one column.
  pure subroutine {p}_path_weights(n_layer, edges, dx, dy, solar_zenith_angle, solar_beam_azimuth, paths)
    integer, intent(in) :: n_layer
    real(real64), intent(in) :: edges(n_layer + 1), dx, dy, solar_zenith_angle, solar_beam_azimuth
    type({p}_slant_weights), intent(out) :: paths
{_DEGREE}
{_DIRECTION}
    real(real64) :: tan0, phi, ux, uy, ux_face, uy_face, s0, s1, mid
    real(real64), allocatable :: cuts(:), weight(:)
    integer, allocatable :: oy(:), ox(:)
    integer :: k, i, j, e, n_cut, max_cut, capacity, n_entry, x_lo, x_hi, y_lo, y_hi, cx, cy
    tan0 = tan(solar_zenith_angle * degree)
    phi = solar_beam_azimuth * degree
    ! Toward the sun: against the direction the beam travels.
    ux = -cos(phi)
    uy = -sin(phi)
    ux_face = merge(ux, 0.0_real64, abs(ux) >= direction_eps)
    uy_face = merge(uy, 0.0_real64, abs(uy) >= direction_eps)
    max_cut = 2
    capacity = 0
    do k = 1, n_layer
      call {p}_slant_crossings(edges(k) * tan0, edges(k + 1) * tan0, ux, dx, x_lo, x_hi)
      call {p}_slant_crossings(edges(k) * tan0, edges(k + 1) * tan0, uy, dy, y_lo, y_hi)
      n_cut = 2 + max(x_hi - x_lo + 1, 0) + max(y_hi - y_lo + 1, 0)
      max_cut = max(max_cut, n_cut)
      capacity = capacity + n_cut
    end do
    allocate (cuts(max_cut), oy(capacity), ox(capacity), weight(capacity), paths%first(n_layer + 1))
    n_entry = 0
    do k = 1, n_layer
      paths%first(k) = n_entry + 1
      s0 = edges(k) * tan0
      s1 = edges(k + 1) * tan0
      if (.not. (s1 - s0 > 0.0_real64)) then
        ! A vertical path (overhead sun) stays in the column.
        n_entry = n_entry + 1
        oy(n_entry) = 0
        ox(n_entry) = 0
        weight(n_entry) = 1.0_real64
        cycle
      end if
      cuts(1) = s0
      cuts(2) = s1
      n_cut = 2
      call {p}_slant_crossings(s0, s1, ux, dx, x_lo, x_hi)
      do j = x_lo, x_hi
        n_cut = n_cut + 1
        cuts(n_cut) = ((real(j, real64) + 0.5_real64) * dx) / ux
      end do
      call {p}_slant_crossings(s0, s1, uy, dy, y_lo, y_hi)
      do j = y_lo, y_hi
        n_cut = n_cut + 1
        cuts(n_cut) = ((real(j, real64) + 0.5_real64) * dy) / uy
      end do
      cuts(1:n_cut) = min(max(cuts(1:n_cut), s0), s1)
      call {p}_slant_sort_cuts(n_cut, cuts(1:n_cut))
      ! Each piece between distinct cuts lies in the column of its middle; the lengths per column are
      ! added in path order, as numpy's bincount adds them.
      do i = 1, n_cut - 1
        if (.not. (cuts(i + 1) - cuts(i) > 0.0_real64)) cycle
        mid = 0.5_real64 * (cuts(i + 1) + cuts(i))
        cx = floor((mid * ux_face) / dx + 0.5_real64)
        cy = floor((mid * uy_face) / dy + 0.5_real64)
        do e = paths%first(k), n_entry
          if (oy(e) == cy .and. ox(e) == cx) exit
        end do
        if (e > n_entry) then
          n_entry = e
          oy(e) = cy
          ox(e) = cx
          weight(e) = 0.0_real64
        end if
        weight(e) = weight(e) + (cuts(i + 1) - cuts(i))
      end do
      weight(paths%first(k):n_entry) = weight(paths%first(k):n_entry) / (s1 - s0)
      call {p}_slant_sort_entries(n_entry - paths%first(k) + 1, oy(paths%first(k):n_entry), &
          ox(paths%first(k):n_entry), weight(paths%first(k):n_entry))
    end do
    paths%first(n_layer + 1) = n_entry + 1
    allocate (paths%oy(n_entry), paths%ox(n_entry), paths%weight(n_entry))
    paths%oy(:) = oy(1:n_entry)
    paths%ox(:) = ox(1:n_entry)
    paths%weight(:) = weight(1:n_entry)
  end subroutine {p}_path_weights

  !> Columns along x (rx) and y (ry) the path toward the sun reads (runtime.halo._path), its horizontal
  !> travel capped at slant_path_reach [m] if present; huge() for a sun at or below the horizon, a cap
  !> negative or not finite, or a path across 1e6 columns or more.
  pure subroutine {p}_path_reach({_GEOMETRY_ARGS}, rx, ry, slant_path_reach)
    integer, intent(in) :: nz
    real(real64), intent(in) :: z_edge(nz + 1), dx, dy, solar_zenith_angle, solar_beam_azimuth
    integer, intent(out) :: rx, ry
    real(real64), intent(in), optional :: slant_path_reach
    type({p}_slant_weights) :: paths
    rx = huge(rx)
    ry = huge(ry)
    if (.not. {p}_slant_reachable(nz, z_edge, dx, dy, solar_zenith_angle, slant_path_reach)) return
    call {p}_capped_path_weights(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, paths, &
        slant_path_reach)
    call {p}_slant_largest_offsets(paths, rx, ry)
  end subroutine {p}_path_reach
"""


def _reached_procedure(p, base):
    """The weights of the point a path reaches after a horizontal travel s toward the sun (slant_path._reached)."""
    if base == "path":
        body = """    allocate (top%first(2), top%oy(1), top%ox(1), top%weight(1))
    top%first = [1, 2]
    top%oy(1) = floor(s * uy / dy + 0.5_real64)
    top%ox(1) = floor(s * ux / dx + 0.5_real64)
    top%weight(1) = 1.0_real64"""
        names = "ux, uy"
        extra = ""
    else:
        body = """    sx = s * ux / dx
    sy = s * uy / dy
    ix = floor(sx)
    iy = floor(sy)
    fx = sx - ix
    fy = sy - iy
    w = [(1.0_real64 - fx) * (1.0_real64 - fy), fx * (1.0_real64 - fy), (1.0_real64 - fx) * fy, fx * fy]
    n = count(w > 0.0_real64)
    allocate (top%first(2), top%oy(n), top%ox(n), top%weight(n))
    top%first = [1, n + 1]
    top%oy = pack([iy, iy, iy + 1, iy + 1], w > 0.0_real64)
    top%ox = pack([ix, ix + 1, ix, ix + 1], w > 0.0_real64)
    top%weight = pack(w, w > 0.0_real64)"""
        names = "ux, uy, sx, sy, fx, fy, w(4)"
        extra = "\n    integer :: ix, iy, n"
    return f"""
  !> The weights of the point reached after a horizontal travel s [m] toward the sun (slant_path._reached):
  !> {"the column whose centre is nearest" if base == "path" else "the bilinear shares of the displaced column"}.
  pure subroutine {p}_reached_{base}(s, dx, dy, solar_beam_azimuth, top)
    real(real64), intent(in) :: s, dx, dy, solar_beam_azimuth
    type({p}_slant_weights), intent(out) :: top
{_DEGREE}
{_DIRECTION}
    real(real64) :: {names}{extra}
    ux = -cos(solar_beam_azimuth * degree)
    uy = -sin(solar_beam_azimuth * degree)
    if (abs(ux) < direction_eps) ux = 0.0_real64
    if (abs(uy) < direction_eps) uy = 0.0_real64
{body}
  end subroutine {p}_reached_{base}
"""


def _capped_procedure(p, base):
    """The weights of ``PREFIX_{base}_weights`` with the host's cap on the horizontal travel (slant_path._capped)."""
    return _reached_procedure(p, base) + f"""
  !> The weights of {p}_{base}_weights with the paths' horizontal travel capped at slant_path_reach [m]
  !> (slant_path._capped; uncapped when it is absent): below z_cap = slant_path_reach / tan(theta0) the
  !> uncapped weights, above it those of the point the path reaches at z_cap ({p}_reached_{base}), i.e. a
  !> vertical path through the column reached; the layer cut by z_cap
  !> gets both, weighted by the shares of its height below and above z_cap and merged in (oy, ox) order.
  !> slant_path_reach must be finite and >= 0 ({p}_slant_reachable).
  pure subroutine {p}_capped_{base}_weights(n_layer, edges, dx, dy, solar_zenith_angle, solar_beam_azimuth, &
      paths, slant_path_reach)
    integer, intent(in) :: n_layer
    real(real64), intent(in) :: edges(n_layer + 1), dx, dy, solar_zenith_angle, solar_beam_azimuth
    type({p}_slant_weights), intent(out) :: paths
    real(real64), intent(in), optional :: slant_path_reach
{_DEGREE}
    type({p}_slant_weights) :: low, top
    real(real64) :: tan0, z_cap, share, low_edges(n_layer + 1)
    real(real64), allocatable :: weight(:)
    integer, allocatable :: oy(:), ox(:)
    integer :: n_below, k, a, b, n_low, n_top, n_entry, capacity
    logical :: take_low, take_top
    tan0 = tan(solar_zenith_angle * degree)
    z_cap = huge(z_cap)
    if (present(slant_path_reach) .and. tan0 > 0.0_real64) z_cap = slant_path_reach / tan0
    if (z_cap >= edges(n_layer + 1)) then
      call {p}_{base}_weights(n_layer, edges, dx, dy, solar_zenith_angle, solar_beam_azimuth, paths)
      return
    end if
    ! Edges below z_cap (the layers 1 .. n_below - 1 whole, layer n_below up to z_cap), the rest above.
    n_below = count(edges < z_cap)
    call {p}_reached_{base}(slant_path_reach, dx, dy, solar_beam_azimuth, top)
    n_top = size(top%ox)
    if (n_below > 0) then
      low_edges(1:n_below) = edges(1:n_below)
      low_edges(n_below + 1) = z_cap
      call {p}_{base}_weights(n_below, low_edges(1:n_below + 1), dx, dy, solar_zenith_angle, &
          solar_beam_azimuth, low)
      n_low = size(low%ox)
    else
      n_low = 0
    end if
    capacity = n_low + n_top * (n_layer - n_below + 1)
    allocate (paths%first(n_layer + 1), oy(capacity), ox(capacity), weight(capacity))
    n_entry = 0
    do k = 1, n_layer
      paths%first(k) = n_entry + 1
      if (k < n_below) then
        do a = low%first(k), low%first(k + 1) - 1
          n_entry = n_entry + 1
          oy(n_entry) = low%oy(a)
          ox(n_entry) = low%ox(a)
          weight(n_entry) = low%weight(a)
        end do
      else if (k > n_below) then
        oy(n_entry + 1:n_entry + n_top) = top%oy
        ox(n_entry + 1:n_entry + n_top) = top%ox
        weight(n_entry + 1:n_entry + n_top) = top%weight
        n_entry = n_entry + n_top
      else
        ! The layer cut by z_cap: both lists (each in (oy, ox) order) merged, a column in both summed as
        ! numpy's bincount sums it, the part below first; columns of weight 0 dropped.
        share = (z_cap - edges(k)) / (edges(k + 1) - edges(k))
        a = low%first(k)
        b = 1
        do while (a < low%first(k + 1) .or. b <= n_top)
          take_low = a < low%first(k + 1)
          take_top = b <= n_top
          if (take_low .and. take_top) then
            if (low%oy(a) /= top%oy(b)) then
              take_low = low%oy(a) < top%oy(b)
              take_top = .not. take_low
            else if (low%ox(a) /= top%ox(b)) then
              take_low = low%ox(a) < top%ox(b)
              take_top = .not. take_low
            end if
          end if
          n_entry = n_entry + 1
          weight(n_entry) = 0.0_real64
          if (take_low) then
            oy(n_entry) = low%oy(a)
            ox(n_entry) = low%ox(a)
            weight(n_entry) = weight(n_entry) + low%weight(a) * share
            a = a + 1
          end if
          if (take_top) then
            oy(n_entry) = top%oy(b)
            ox(n_entry) = top%ox(b)
            weight(n_entry) = weight(n_entry) + top%weight(b) * (1.0_real64 - share)
            b = b + 1
          end if
          if (.not. (weight(n_entry) > 0.0_real64)) n_entry = n_entry - 1
        end do
      end if
    end do
    paths%first(n_layer + 1) = n_entry + 1
    allocate (paths%oy(n_entry), paths%ox(n_entry), paths%weight(n_entry))
    paths%oy(:) = oy(1:n_entry)
    paths%ox(:) = ox(1:n_entry)
    paths%weight(:) = weight(1:n_entry)
  end subroutine {p}_capped_{base}_weights
"""


def _slant_depth_procedure(p):
    return f"""
  !> slant_optical_depth [1] of the own columns: the path's weighted sum of the layer optical depths over
  !> mu0 (Beer-Lambert along the slant path); for feature 'slant_minus_vertical_optical_depth', minus the
  !> column's own tau / mu0; the path's travel capped at slant_path_reach [m] if present. With
  !> minus_vertical (feature 'slant_optical_depth'), that difference goes there too: both features from one
  !> pass over the paths. The halo must cover {p}_path_reach.
  pure subroutine {p}_slant_depth({_CALL_HEAD}, &
      layer_optical_depth, feature, out, slant_path_reach, minus_vertical)
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge(nz + 1)
    real(real64), intent(in) :: layer_optical_depth(1-hx:nx+hx, 1-hy:ny+hy, nz)
    character(len=*), intent(in) :: feature
    real(real64), intent(out) :: out(nx, ny)
    real(real64), intent(in), optional :: slant_path_reach
    real(real64), intent(out), optional :: minus_vertical(nx, ny)
{_DEGREE}
    type({p}_slant_weights) :: paths
    real(real64) :: mu0, total, plane
    real(real64), allocatable :: column(:, :)
    integer :: ix, iy, g, t, k
    logical :: vertical
    mu0 = cos(solar_zenith_angle * degree)
    call {p}_capped_path_weights(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, paths, &
        slant_path_reach)
    call {p}_slant_group_offsets(nz, paths)
    vertical = feature == 'slant_minus_vertical_optical_depth' .or. present(minus_vertical)
    allocate (column(nx, ny))
    if (vertical) then
      ! The own columns' optical depths, a layer plane at a time (a column's layers are a plane apart).
      column = 0.0_real64
      do k = 1, nz
        column = column + layer_optical_depth(1:nx, 1:ny, k)
      end do
    end if
    do iy = 1, ny
      do ix = 1, nx
        total = 0.0_real64
        do g = 1, size(paths%group_ox)
          plane = 0.0_real64
          do t = paths%group_first(g), paths%group_first(g + 1) - 1
            plane = plane + layer_optical_depth(ix + paths%group_ox(g), iy + paths%group_oy(g), &
                                                paths%term_layer(t)) * paths%term_weight(t)
          end do
          total = total + plane
        end do
        out(ix, iy) = total / mu0
        if (.not. vertical) cycle
        if (present(minus_vertical)) then
          minus_vertical(ix, iy) = out(ix, iy) - column(ix, iy) / mu0
        else
          out(ix, iy) = out(ix, iy) - column(ix, iy) / mu0
        end if
      end do
    end do
  end subroutine {p}_slant_depth
"""


def slant_depth_above_procedure(prefix):
    """Fortran text of ``PREFIX_slant_depth_above``: the optical depth along the path from every layer's middle.

    The generated subroutine computes
    :func:`surrogate3d.pairs.profiles.slant_optical_depth_above` of the own columns of
    fields with a halo::

        PREFIX_slant_depth_above(nx, ny, nz, hx, hy, dx, dy, solar_zenith_angle, solar_beam_azimuth, &
                                 z_edge, layer_optical_depth, slant[, slant_path_reach])

    with ``slant(nz, nx * ny)`` [1], layer ``k`` of own column ``i = ix + (iy - 1) * nx``,
    and the optional cap ``slant_path_reach`` [m] (finite, >= 0; the ``reach`` of
    ``slant_optical_depth_above``).
    It uses the path-weight procedures that :func:`slant_procedures` emits with it: put
    ``"slant_optical_depth_above"`` in ``needed`` of :func:`slant_procedures` (which
    includes this text) and of :func:`slant_declarations` (which makes it and its reach
    public); its reach is ``slant_reach_call(prefix, "slant_optical_depth_above", rx, ry)``,
    a call of ``PREFIX_path_reach(nz, z_edge, dx, dy, solar_zenith_angle,
    solar_beam_azimuth, rx, ry[, slant_path_reach])`` (give it the same cap).

    Parameters
    ----------
    prefix : str
        The Fortran model name (:func:`surrogate3d.export.fortran.fortran_name`).

    Returns
    -------
    str
        Fortran text of the module procedure.

    Examples
    --------
    >>> slant_depth_above_procedure("boosted").count("pure subroutine boosted_slant_depth_above(")
    1
    """
    p = prefix
    return _wrapped(f"""
  !> Optical depth [1] along the straight path from the middle of every layer toward the sun
  !> (surrogate3d.pairs.profiles.slant_optical_depth_above): through the upper half of the layer and every
  !> layer above, crossing neighbouring columns; Beer-Lambert along the path, sum w tau / mu0.
  !> slant(k, i) for layer k of own column i = ix + (iy - 1) * nx. With slant_path_reach [m] (finite, >= 0)
  !> the paths' horizontal travel is capped there (slant_path.path_weights). The halo must cover
  !> {p}_path_reach of the same cap.
  pure subroutine {p}_slant_depth_above({_CALL_HEAD}, &
      layer_optical_depth, slant, slant_path_reach)
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge(nz + 1)
    real(real64), intent(in) :: layer_optical_depth(1-hx:nx+hx, 1-hy:ny+hy, nz)
    real(real64), intent(out) :: slant(nz, nx * ny)
    real(real64), intent(in), optional :: slant_path_reach
{_DEGREE}
    type({p}_slant_weights) :: paths(nz)
    real(real64) :: edges(nz + 1), mu0, middle, total, plane, value
    integer :: ix, iy, k, g, t, j, jx, jy
    mu0 = cos(solar_zenith_angle * degree)
    ! The path from layer k's middle meets nz - k + 1 layers: the upper half of its own, then those above.
    do k = 1, nz
      middle = 0.5_real64 * (z_edge(k) + z_edge(k + 1))
      edges(1) = 0.0_real64
      edges(2:nz - k + 2) = z_edge(k + 1:nz + 1) - middle
      call {p}_capped_path_weights(nz - k + 1, edges(1:nz - k + 2), dx, dy, solar_zenith_angle, &
          solar_beam_azimuth, paths(k), slant_path_reach)
      call {p}_slant_group_offsets(nz - k + 1, paths(k))
    end do
    do iy = 1, ny
      do ix = 1, nx
        do k = 1, nz
          total = 0.0_real64
          do g = 1, size(paths(k)%group_ox)
            jx = ix + paths(k)%group_ox(g)
            jy = iy + paths(k)%group_oy(g)
            plane = 0.0_real64
            do t = paths(k)%group_first(g), paths(k)%group_first(g + 1) - 1
              j = paths(k)%term_layer(t)
              if (j == 1) then
                value = 0.5_real64 * layer_optical_depth(jx, jy, k)
              else
                value = layer_optical_depth(jx, jy, k + j - 1)
              end if
              plane = plane + value * paths(k)%term_weight(t)
            end do
            total = total + plane
          end do
          slant(k, ix + (iy - 1) * nx) = total / mu0
        end do
      end do
    end do
  end subroutine {p}_slant_depth_above
""")


def _area_procedures(p):
    """The swept-area weights (slant_path.area_path_weights) and their reach (halo._area)."""
    return f"""
  !> Area weights of slant_path.area_path_weights for the n_layer layers between edges(k) and
  !> edges(k + 1) [m]: the share of each column in the copy of a column displaced toward the sun by
  !> z tan(theta0) (bilinear weights of the displacement), averaged over the layer by the midpoint rule on
  !> sub-layers displaced by at most {_AREA_MAX_STEP!r} column.
  pure subroutine {p}_area_weights(n_layer, edges, dx, dy, solar_zenith_angle, solar_beam_azimuth, paths)
    integer, intent(in) :: n_layer
    real(real64), intent(in) :: edges(n_layer + 1), dx, dy, solar_zenith_angle, solar_beam_azimuth
    type({p}_slant_weights), intent(out) :: paths
{_DEGREE}
{_DIRECTION}
    real(real64), parameter :: max_step = {_real(_AREA_MAX_STEP)}
    real(real64) :: tan0, phi, ux, uy, step, shift, s, sx, sy, w
    real(real64), allocatable :: fx(:), fy(:), weight(:)
    integer, allocatable :: cx(:), cy(:), oy(:), ox(:)
    integer :: k, i, e, n, corner, capacity, max_n, n_entry, n_kept, key_x, key_y
    tan0 = tan(solar_zenith_angle * degree)
    phi = solar_beam_azimuth * degree
    ux = -cos(phi)
    uy = -sin(phi)
    if (abs(ux) < direction_eps) ux = 0.0_real64
    if (abs(uy) < direction_eps) uy = 0.0_real64
    step = max_step * min(dx, dy)
    max_n = 1
    capacity = 0
    do k = 1, n_layer
      n = max(1, ceiling(((edges(k + 1) - edges(k)) * tan0) / step))
      max_n = max(max_n, n)
      capacity = capacity + 4 * n
    end do
    allocate (fx(max_n), fy(max_n), cx(max_n), cy(max_n), oy(capacity), ox(capacity), weight(capacity), &
              paths%first(n_layer + 1))
    n_entry = 0
    do k = 1, n_layer
      paths%first(k) = n_entry + 1
      shift = (edges(k + 1) - edges(k)) * tan0
      n = max(1, ceiling(shift / step))
      do i = 1, n
        s = edges(k) * tan0 + (real(i - 1, real64) + 0.5_real64) * (shift / real(n, real64))
        sx = (s * ux) / dx
        sy = (s * uy) / dy
        cx(i) = floor(sx)
        cy(i) = floor(sy)
        fx(i) = sx - real(cx(i), real64)
        fy(i) = sy - real(cy(i), real64)
      end do
      ! The four cells of the bilinear weights (bit 0 of corner: one column along x, bit 1: one along y),
      ! each over all sub-layers in turn: the order in which numpy's bincount adds the shares.
      do corner = 0, 3
        do i = 1, n
          key_x = cx(i) + mod(corner, 2)
          key_y = cy(i) + corner / 2
          w = (merge(fx(i), 1.0_real64 - fx(i), mod(corner, 2) == 1) &
               * merge(fy(i), 1.0_real64 - fy(i), corner / 2 == 1)) / real(n, real64)
          do e = paths%first(k), n_entry
            if (oy(e) == key_y .and. ox(e) == key_x) exit
          end do
          if (e > n_entry) then
            n_entry = e
            oy(e) = key_y
            ox(e) = key_x
            weight(e) = 0.0_real64
          end if
          weight(e) = weight(e) + w
        end do
      end do
      ! Cells whose share is 0 (a displacement on a cell boundary) are not read.
      n_kept = paths%first(k) - 1
      do e = paths%first(k), n_entry
        if (.not. (weight(e) > 0.0_real64)) cycle
        n_kept = n_kept + 1
        oy(n_kept) = oy(e)
        ox(n_kept) = ox(e)
        weight(n_kept) = weight(e)
      end do
      n_entry = n_kept
      call {p}_slant_sort_entries(n_entry - paths%first(k) + 1, oy(paths%first(k):n_entry), &
          ox(paths%first(k):n_entry), weight(paths%first(k):n_entry))
    end do
    paths%first(n_layer + 1) = n_entry + 1
    allocate (paths%oy(n_entry), paths%ox(n_entry), paths%weight(n_entry))
    paths%oy(:) = oy(1:n_entry)
    paths%ox(:) = ox(1:n_entry)
    paths%weight(:) = weight(1:n_entry)
  end subroutine {p}_area_weights

  !> Columns along x (rx) and y (ry) the paths from a column's whole surface toward the sun read
  !> (runtime.halo._area), capped at slant_path_reach [m] if present; huge() as {p}_path_reach.
  pure subroutine {p}_area_reach({_GEOMETRY_ARGS}, rx, ry, slant_path_reach)
    integer, intent(in) :: nz
    real(real64), intent(in) :: z_edge(nz + 1), dx, dy, solar_zenith_angle, solar_beam_azimuth
    integer, intent(out) :: rx, ry
    real(real64), intent(in), optional :: slant_path_reach
    type({p}_slant_weights) :: paths
    rx = huge(rx)
    ry = huge(ry)
    if (.not. {p}_slant_reachable(nz, z_edge, dx, dy, solar_zenith_angle, slant_path_reach)) return
    call {p}_capped_area_weights(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, paths, &
        slant_path_reach)
    call {p}_slant_largest_offsets(paths, rx, ry)
  end subroutine {p}_area_reach
"""


def _prior_procedures(p):
    """The direct-beam prior (features._direct_prior) and its column formula."""
    return f"""
  !> log(1 + x) accurate for small x (Fortran 2008 has no log1p): x log(u) / (u - 1) with u = 1 + x, whose
  !> rounding errors cancel (Goldberg 1991, What every computer scientist should know about
  !> floating-point arithmetic, ACM Computing Surveys 23, 5-48, theorem 4).
  elemental real(real64) function {p}_slant_log1p(x)
    real(real64), intent(in) :: x
    real(real64) :: u
    u = 1.0_real64 + x
    if (u == 1.0_real64) then
      {p}_slant_log1p = x
    else
      {p}_slant_log1p = (x * log(u)) / (u - 1.0_real64)
    end if
  end function {p}_slant_log1p

  !> Blocks of adjacent cloudy layers of one path, top down (features._scan_blocks): each block's cover
  !> (maximum-random overlap within it, Geleyn and Hollingsworth 1979), cloud optical depth [1] and cloud
  !> volume per area sum c dz [m]; loose, the cloud optical depth of layers without cloud fraction. The
  !> cloud fraction is clipped to [0, 1] (c below).
  pure subroutine {p}_prior_cloud_blocks(nz, fraction, cloud, dz, n_block, cover, depth, volume, loose)
    integer, intent(in) :: nz
    real(real64), intent(in) :: fraction(nz), cloud(nz), dz(nz)
    integer, intent(out) :: n_block
    real(real64), intent(out), dimension(nz) :: cover, depth, volume
    real(real64), intent(out) :: loose
    real(real64) :: c, c_above, run_clear, run_depth, run_volume
    logical :: ends
    integer :: k
    n_block = 0
    loose = 0.0_real64
    run_clear = 1.0_real64
    run_depth = 0.0_real64
    run_volume = 0.0_real64
    c_above = 0.0_real64
    do k = nz, 1, -1
      c = min(max(fraction(k), 0.0_real64), 1.0_real64)
      if (c > 0.0_real64) then
        if (c_above > 0.0_real64) then
          ! (1 - max(c_k, c_k+1)) / (1 - c_k+1), 0 below an overcast layer (features._overlap_ratio)
          if (1.0_real64 - c_above > 0.0_real64) then
            run_clear = run_clear * ((1.0_real64 - max(c, c_above)) / (1.0_real64 - c_above))
          else
            run_clear = 0.0_real64
          end if
          run_depth = run_depth + cloud(k)
          run_volume = run_volume + c * dz(k)
        else
          run_clear = 1.0_real64 - c
          run_depth = cloud(k)
          run_volume = c * dz(k)
        end if
        ends = k == 1
        if (.not. ends) ends = min(max(fraction(k - 1), 0.0_real64), 1.0_real64) <= 0.0_real64
        if (ends) then
          n_block = n_block + 1
          cover(n_block) = 1.0_real64 - run_clear
          depth(n_block) = run_depth
          volume(n_block) = run_volume
        end if
      else
        loose = loose + cloud(k)
      end if
      c_above = c
    end do
  end subroutine {p}_prior_cloud_blocks

  !> The host column's overlap exponent gamma (features.overlap_exponent) and in-cloud relative variance v
  !> (features._relative_variance_of_blocks with gamma) from the blocks of its own layers (cover and cloud
  !> optical depth of {p}_prior_cloud_blocks), its total cloud fraction and its sub-grid standard deviation of
  !> optical depth.
  pure subroutine {p}_overlap_statistics(n_block, cover, depth, total_cloud_fraction, column_std, v, gamma)
    integer, intent(in) :: n_block
    real(real64), intent(in) :: cover(n_block), depth(n_block), total_cloud_fraction, column_std
    real(real64), intent(out) :: v, gamma
    real(real64) :: clear, c, adjusted, squared, between, within
    integer :: j
    clear = 1.0_real64
    do j = 1, n_block
      clear = clear * (1.0_real64 - cover(j))
    end do
    c = min(max(total_cloud_fraction, 0.0_real64), 1.0_real64)
    if (clear > 0.0_real64 .and. clear < 1.0_real64 .and. c > 0.0_real64) then
      gamma = log(max(1.0_real64 - c, 1.0e-9_real64)) / log(clear)
    else
      gamma = 1.0_real64
    end if
    between = 0.0_real64
    within = 0.0_real64
    do j = 1, n_block
      adjusted = 1.0_real64 - (1.0_real64 - cover(j)) ** gamma
      squared = 0.0_real64
      if (adjusted > 0.0_real64) squared = (depth(j) * depth(j)) / adjusted
      within = within + squared
      between = between + squared * (1.0_real64 - adjusted)
    end do
    v = 0.0_real64
    if (within > 0.0_real64) v = (column_std ** 2 - between) / within
    v = max(v, 0.0_real64)
  end subroutine {p}_overlap_statistics

  !> Mean cloud width over mean cloud area [m-1] of a Boolean model (features.cloud_width_per_area) from the
  !> total cloud fraction and the cloud-edge length per area counted along grid faces [m-1].
  elemental real(real64) function {p}_width_per_area(total_cloud_fraction, cloud_edge_length)
    real(real64), intent(in) :: total_cloud_fraction, cloud_edge_length
    real(real64), parameter :: pi = 3.141592653589793_real64
    real(real64), parameter :: staircase_to_euclidean = {_real(STAIRCASE_TO_EUCLIDEAN)}
    real(real64) :: clear, denominator
    clear = 1.0_real64 - min(max(total_cloud_fraction, 0.0_real64), 1.0_real64)
    denominator = pi * clear * (-log(merge(clear, 1.0_real64, clear > 0.0_real64)))
    {p}_width_per_area = 0.0_real64
    if (denominator > 0.0_real64) {p}_width_per_area = (staircase_to_euclidean * cloud_edge_length) / denominator
  end function {p}_width_per_area

  !> Mean direct transmittance [1] of a path through partly cloudy layers (features.direct_transmittance_prior):
  !> blocks of cloudy layers overlapped at random, their covers made consistent by gamma, seen slanted as
  !> 1 - (1 - C)^(1 + rho H tan(theta0)), the cloud optical depth gamma-distributed with relative variance v
  !> (mean transmittance (1 + m v / mu0)^(-1 / v)), Beer-Lambert for the clear sky and loose cloud; the blocks
  !> and loose as {p}_prior_cloud_blocks gives them.
  pure real(real64) function {p}_prior_transmittance(n_block, cover, depth, volume, loose, clear_depth, v, mu0, &
      rho, gamma)
    integer, intent(in) :: n_block
    real(real64), intent(in), dimension(n_block) :: cover, depth, volume
    real(real64), intent(in) :: loose, clear_depth, v, mu0, rho, gamma
    real(real64) :: tan0, adjusted, thickness, seen, mean, exponent
    integer :: j
    tan0 = sqrt(max(1.0_real64 - mu0 * mu0, 0.0_real64)) / mu0
    {p}_prior_transmittance = exp(-(clear_depth + loose) / mu0)
    do j = 1, n_block
      adjusted = 1.0_real64 - (1.0_real64 - cover(j)) ** gamma
      thickness = 0.0_real64
      if (adjusted > 0.0_real64) thickness = volume(j) / adjusted
      seen = 1.0_real64 - min(max(adjusted, 0.0_real64), 1.0_real64)
      ! 0 ** exponent is 0: the exponent is at least 1.
      seen = 1.0_real64 - merge(seen, 0.0_real64, seen > 0.0_real64) ** (1.0_real64 + rho * thickness * tan0)
      mean = 0.0_real64
      if (seen > 0.0_real64) mean = depth(j) / seen
      if (v > 0.0_real64) then
        exponent = {p}_slant_log1p((mean * v) / mu0) / v
      else
        exponent = mean / mu0
      end if
      {p}_prior_transmittance = {p}_prior_transmittance * ((1.0_real64 - seen) + seen * exp(-exponent))
    end do
  end function {p}_prior_transmittance

  !> The direct-beam priors [1] of the own columns, all in one pass over the columns (the weights and the
  !> column statistics computed once): prior, along the paths toward the sun (feature 'direct_beam_prior');
  !> minus_independent_column, that minus the host's independent-column direct flux ica_direct
  !> ('direct_beam_prior_minus_independent_column'); slant_minus_vertical, that minus the same formula along
  !> the vertical ('direct_beam_prior_slant_minus_vertical'). Only those present are computed (ica_direct is
  !> read for minus_independent_column only). The paths' travel is capped at slant_path_reach [m] if present.
  !> The halo must cover {p}_area_reach.
  !>
  !> As features._direct_prior: the layers' cloud fraction and cloud optical depth gathered along the area
  !> weights (slant_path.gather_layers), the clear-sky optical depth summed along them, and the crossed
  !> columns' v (weighted by the cloud optical depth met in each), rho and gamma (weighted by the cloud
  !> fraction met), each summed as slant_path.slant_sum sums it.
  pure subroutine {p}_direct_priors({_CALL_HEAD}, &
      layer_cloud_fraction, layer_optical_depth, layer_clear_sky_optical_depth, total_cloud_fraction, &
      column_optical_depth_std, cloud_edge_length, ica_direct, prior, minus_independent_column, &
      slant_minus_vertical, slant_path_reach)
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge(nz + 1)
    real(real64), intent(in), dimension(1-hx:nx+hx, 1-hy:ny+hy, nz) :: layer_cloud_fraction, &
        layer_optical_depth, layer_clear_sky_optical_depth
    real(real64), intent(in), dimension(1-hx:nx+hx, 1-hy:ny+hy) :: total_cloud_fraction, &
        column_optical_depth_std, cloud_edge_length, ica_direct
    real(real64), intent(out), dimension(nx, ny), optional :: prior, minus_independent_column, &
        slant_minus_vertical
    real(real64), intent(in), optional :: slant_path_reach
{_DEGREE}
    type({p}_slant_weights) :: paths
    real(real64), allocatable, dimension(:, :) :: v, rho, gamma, path_fraction, path_cloud, row_fraction, row_cloud
    real(real64), allocatable, dimension(:) :: cloud_total, fraction_total, clear_path, v_sum, rho_sum, gamma_sum, &
        row_clear
    real(real64), allocatable :: vertical(:, :)
    real(real64) :: mu0, w, v_path, rho_path, gamma_path, slanted, loose, sum_cloud, sum_fraction, &
        plane_clear, plane_v, plane_rho, plane_gamma
    real(real64), dimension(nz) :: dz, zeros, cover, depth, volume
    integer :: ix, iy, k, e, g, t, rx, ry, jx, jy, n_block
    mu0 = cos(solar_zenith_angle * degree)
    dz = z_edge(2:nz + 1) - z_edge(1:nz)
    zeros = 0.0_real64
    call {p}_capped_area_weights(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, paths, &
        slant_path_reach)
    call {p}_slant_group_offsets(nz, paths)
    call {p}_slant_largest_offsets(paths, rx, ry)
    ! The cloud optical depth (features._cloud_layers) and the column statistics of every column the own
    ! columns' paths meet, from the blocks of their own layers; with these blocks, the prior along the
    ! vertical of the own columns (features._direct_prior, not slanted).
    ! The cloud optical depth is max(tau - clear-sky tau, 0) wherever it is read: no block-sized array of it.
    allocate (v(1-rx:nx+rx, 1-ry:ny+ry), rho(1-rx:nx+rx, 1-ry:ny+ry), gamma(1-rx:nx+rx, 1-ry:ny+ry), &
              vertical(nx, ny), row_fraction(nz, 1-rx:nx+rx), row_cloud(nz, 1-rx:nx+rx), row_clear(1-rx:nx+rx))
    do iy = 1 - ry, ny + ry
      ! The row's columns with their layers in contiguous memory, the fields read along x (a column's
      ! layers are a field plane apart); with them each column's clear-sky optical depth, summed up.
      row_clear = 0.0_real64
      do k = 1, nz
        do ix = 1 - rx, nx + rx
          row_fraction(k, ix) = layer_cloud_fraction(ix, iy, k)
          row_cloud(k, ix) = max(layer_optical_depth(ix, iy, k) - layer_clear_sky_optical_depth(ix, iy, k), 0.0_real64)
          row_clear(ix) = row_clear(ix) + layer_clear_sky_optical_depth(ix, iy, k)
        end do
      end do
      do ix = 1 - rx, nx + rx
        call {p}_prior_cloud_blocks(nz, row_fraction(:, ix), row_cloud(:, ix), zeros, n_block, cover, depth, volume, &
            loose)
        call {p}_overlap_statistics(n_block, cover, depth, total_cloud_fraction(ix, iy), &
            column_optical_depth_std(ix, iy), v(ix, iy), gamma(ix, iy))
        rho(ix, iy) = {p}_width_per_area(total_cloud_fraction(ix, iy), cloud_edge_length(ix, iy))
        if (.not. present(slant_minus_vertical)) cycle
        if (ix < 1 .or. ix > nx .or. iy < 1 .or. iy > ny) cycle
        vertical(ix, iy) = {p}_prior_transmittance(n_block, cover, depth, volume, loose, row_clear(ix), v(ix, iy), &
            mu0, 0.0_real64, gamma(ix, iy))
      end do
    end do
    ! path_fraction(:, ix), path_cloud(:, ix): the layers along own column ix's path, contiguous.
    allocate (path_fraction(nz, nx), path_cloud(nz, nx), cloud_total(nx), fraction_total(nx), clear_path(nx), &
              v_sum(nx), rho_sum(nx), gamma_sum(nx))
    do iy = 1, ny
      ! The sums of one own column in registers, the own columns of the row in turn: each term of a sum
      ! reads the next element of a row of the fields.
      cloud_total = 0.0_real64
      fraction_total = 0.0_real64
      do k = 1, nz
        do ix = 1, nx
          sum_cloud = 0.0_real64
          sum_fraction = 0.0_real64
          do e = paths%first(k), paths%first(k + 1) - 1
            jx = ix + paths%ox(e)
            jy = iy + paths%oy(e)
            w = paths%weight(e)
            sum_cloud = sum_cloud + w * max(layer_optical_depth(jx, jy, k) - layer_clear_sky_optical_depth(jx, jy, k), &
                                            0.0_real64)
            sum_fraction = sum_fraction + w * layer_cloud_fraction(jx, jy, k)
          end do
          path_cloud(k, ix) = sum_cloud
          path_fraction(k, ix) = sum_fraction
          cloud_total(ix) = cloud_total(ix) + sum_cloud
          fraction_total(ix) = fraction_total(ix) + sum_fraction
        end do
      end do
      clear_path = 0.0_real64
      v_sum = 0.0_real64
      rho_sum = 0.0_real64
      gamma_sum = 0.0_real64
      do g = 1, size(paths%group_ox)
        jy = iy + paths%group_oy(g)
        do ix = 1, nx
          jx = ix + paths%group_ox(g)
          plane_clear = 0.0_real64
          plane_v = 0.0_real64
          plane_rho = 0.0_real64
          plane_gamma = 0.0_real64
          do t = paths%group_first(g), paths%group_first(g + 1) - 1
            k = paths%term_layer(t)
            w = paths%term_weight(t)
            plane_clear = plane_clear + layer_clear_sky_optical_depth(jx, jy, k) * w
            plane_v = plane_v + (max(layer_optical_depth(jx, jy, k) - layer_clear_sky_optical_depth(jx, jy, k), &
                                     0.0_real64) * v(jx, jy)) * w
            plane_rho = plane_rho + (layer_cloud_fraction(jx, jy, k) * rho(jx, jy)) * w
            plane_gamma = plane_gamma + (layer_cloud_fraction(jx, jy, k) * gamma(jx, jy)) * w
          end do
          clear_path(ix) = clear_path(ix) + plane_clear
          v_sum(ix) = v_sum(ix) + plane_v
          rho_sum(ix) = rho_sum(ix) + plane_rho
          gamma_sum(ix) = gamma_sum(ix) + plane_gamma
        end do
      end do
      do ix = 1, nx
        v_path = 0.0_real64
        if (cloud_total(ix) > 0.0_real64) v_path = v_sum(ix) / cloud_total(ix)
        rho_path = 0.0_real64
        gamma_path = 0.0_real64
        if (fraction_total(ix) > 0.0_real64) then
          rho_path = rho_sum(ix) / fraction_total(ix)
          gamma_path = gamma_sum(ix) / fraction_total(ix)
        end if
        call {p}_prior_cloud_blocks(nz, path_fraction(:, ix), path_cloud(:, ix), dz, n_block, cover, depth, volume, &
            loose)
        slanted = {p}_prior_transmittance(n_block, cover, depth, volume, loose, clear_path(ix), v_path, mu0, &
            rho_path, gamma_path)
        if (present(prior)) prior(ix, iy) = slanted
        if (present(minus_independent_column)) minus_independent_column(ix, iy) = slanted - ica_direct(ix, iy)
        if (present(slant_minus_vertical)) slant_minus_vertical(ix, iy) = slanted - vertical(ix, iy)
      end do
    end do
  end subroutine {p}_direct_priors
"""


def _interception_procedures(p):
    """The direct-beam interception of tilted columns (features._interception) and its reach (halo._area_twice)."""
    return f"""
  !> exp(x) - 1 accurate for small x (Fortran 2008 has no expm1): (u - 1) x / log(u) with u = exp(x), whose
  !> rounding errors cancel (Kahan's method; Higham 2002, Accuracy and Stability of Numerical Algorithms,
  !> SIAM, section 1.14.1).
  elemental real(real64) function {p}_slant_expm1(x)
    real(real64), intent(in) :: x
    real(real64) :: u
    u = exp(x)
    if (u == 1.0_real64) then
      {p}_slant_expm1 = x
    else if (u - 1.0_real64 == -1.0_real64) then
      {p}_slant_expm1 = -1.0_real64
    else
      {p}_slant_expm1 = ((u - 1.0_real64) * x) / log(u)
    end if
  end function {p}_slant_expm1

  !> Share of the incident direct beam each layer of a column removes (features._layer_interception),
  !> exp(-tau_above / mu0) (1 - exp(-tau_k / mu0)) (Beer-Lambert), layers bottom first.
  pure subroutine {p}_layer_interception(nz, tau, mu0, share)
    integer, intent(in) :: nz
    real(real64), intent(in) :: tau(nz), mu0
    real(real64), intent(out) :: share(nz)
    real(real64) :: above
    integer :: k
    above = 0.0_real64
    do k = nz, 1, -1
      ! numpy's cumulative sum from the top, including the layer itself, minus the layer.
      above = above + tau(k)
      share(k) = exp(-(above - tau(k)) / mu0) * (-{p}_slant_expm1(-tau(k) / mu0))
    end do
  end subroutine {p}_layer_interception

  !> Columns along x (rx) and y (ry) the tilted interception reads (runtime.halo._area_twice): twice the
  !> swept area's, out along the paths and back; huge() as {p}_area_reach.
  pure subroutine {p}_area_twice_reach({_GEOMETRY_ARGS}, rx, ry, slant_path_reach)
    integer, intent(in) :: nz
    real(real64), intent(in) :: z_edge(nz + 1), dx, dy, solar_zenith_angle, solar_beam_azimuth
    integer, intent(out) :: rx, ry
    real(real64), intent(in), optional :: slant_path_reach
    call {p}_area_reach({_GEOMETRY_ARGS}, rx, ry, slant_path_reach)
    if (rx < huge(rx)) rx = 2 * rx
    if (ry < huge(ry)) ry = 2 * ry
  end subroutine {p}_area_twice_reach

  !> direct_beam_interception_tilted [1] of the own columns (feature of that name): along the area weights
  !> the tilted columns' layers remove exp(-tau_above / mu0) (1 - exp(-tau_k / mu0)) of the beam, returned
  !> to the cells the paths cross in proportion to the optical depth met in each (slant_path.scatter_layers)
  !> and summed over the column's layers; for 'direct_beam_interception_tilted_minus_vertical' minus the
  !> vertical column's share, for 'direct_beam_interception_relative_change' that difference over
  !> max(vertical, 0.01). The paths' travel is capped at slant_path_reach [m] if present. The halo must cover
  !> {p}_area_twice_reach.
  pure subroutine {p}_interception({_CALL_HEAD}, &
      layer_optical_depth, feature, out, slant_path_reach)
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge(nz + 1)
    real(real64), intent(in) :: layer_optical_depth(1-hx:nx+hx, 1-hy:ny+hy, nz)
    character(len=*), intent(in) :: feature
    real(real64), intent(out) :: out(nx, ny)
    real(real64), intent(in), optional :: slant_path_reach
{_DEGREE}
    type({p}_slant_weights) :: paths
    real(real64), allocatable :: per_tau(:, :, :)
    real(real64) :: mu0, path_tau(nz), share(nz), scattered, tilted, vertical
    integer :: ix, iy, k, e, rx, ry
    mu0 = cos(solar_zenith_angle * degree)
    call {p}_capped_area_weights(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, paths, &
        slant_path_reach)
    call {p}_slant_largest_offsets(paths, rx, ry)
    ! The tilted columns through every cell the own columns' paths meet: what each removes per unit of
    ! optical depth met, layer by layer.
    allocate (per_tau(nz, 1-rx:nx+rx, 1-ry:ny+ry))
    do iy = 1 - ry, ny + ry
      do ix = 1 - rx, nx + rx
        do k = 1, nz
          path_tau(k) = 0.0_real64
          do e = paths%first(k), paths%first(k + 1) - 1
            path_tau(k) = path_tau(k) + paths%weight(e) * layer_optical_depth(ix + paths%ox(e), iy + paths%oy(e), k)
          end do
        end do
        call {p}_layer_interception(nz, path_tau, mu0, share)
        do k = 1, nz
          per_tau(k, ix, iy) = 0.0_real64
          if (path_tau(k) > 0.0_real64) per_tau(k, ix, iy) = share(k) / path_tau(k)
        end do
      end do
    end do
    do iy = 1, ny
      do ix = 1, nx
        tilted = 0.0_real64
        do k = 1, nz
          scattered = 0.0_real64
          do e = paths%first(k), paths%first(k + 1) - 1
            scattered = scattered + paths%weight(e) * per_tau(k, ix - paths%ox(e), iy - paths%oy(e))
          end do
          tilted = tilted + scattered * layer_optical_depth(ix, iy, k)
        end do
        if (feature == 'direct_beam_interception_tilted') then
          out(ix, iy) = tilted
          cycle
        end if
        call {p}_layer_interception(nz, layer_optical_depth(ix, iy, :), mu0, share)
        vertical = 0.0_real64
        do k = 1, nz
          vertical = vertical + share(k)
        end do
        out(ix, iy) = tilted - vertical
        if (feature == 'direct_beam_interception_relative_change') then
          out(ix, iy) = out(ix, iy) / max(vertical, 0.01_real64)
        end if
      end do
    end do
  end subroutine {p}_interception
"""


def slant_declarations(prefix, needed):
    """Module-level declarations of the slant-path procedures (to go before ``contains``).

    Parameters
    ----------
    prefix : str
        The Fortran model name.
    needed : iterable of str
        Feature names from :data:`SLANT_FEATURES`, and ``"slant_optical_depth_above"``
        for :func:`slant_depth_above_procedure`.

    Returns
    -------
    str
        The derived type of the path weights (private) and, with
        ``"slant_optical_depth_above"``, the statement making ``PREFIX_slant_depth_above``
        and its reach ``PREFIX_path_reach`` public; ``""`` when nothing is needed.

    Raises
    ------
    surrogate3d.errors.ParameterError
        A name of ``needed`` that this module does not compute.

    Examples
    --------
    >>> slant_declarations("boosted", [])
    ''
    """
    families = _families(needed)
    if not families:
        return ""
    text = _type_declaration(prefix) + f"\n  private :: {prefix}_slant_weights\n"
    if "depth_above" in families:
        text += f"  public :: {prefix}_slant_depth_above, {prefix}_path_reach\n"
    return _wrapped(text)


def slant_procedures(prefix, needed):
    """Fortran text of the module procedures of the slant-path features in ``needed`` (to go after ``contains``).

    Parameters
    ----------
    prefix : str
        The Fortran model name (every procedure name starts with ``PREFIX_``).
    needed : iterable of str
        Feature names from :data:`SLANT_FEATURES`, and ``"slant_optical_depth_above"``
        for :func:`slant_depth_above_procedure`.

    Returns
    -------
    str
        The feature procedures (:func:`slant_call`), their reach procedures
        (:func:`slant_reach_call`) and the geometry they share; ``""`` when nothing is
        needed.  The module also needs :func:`slant_declarations` of the same ``needed``.

    Raises
    ------
    surrogate3d.errors.ParameterError
        A name of ``needed`` that this module does not compute.

    Examples
    --------
    >>> text = slant_procedures("boosted", ["direct_beam_prior"])
    >>> "subroutine boosted_direct_priors(" in text, "subroutine boosted_slant_depth(" in text
    (True, False)
    """
    families = _families(needed)
    if not families:
        return ""
    p = prefix
    parts = [_common_procedures(p)]
    if families & {"path", "depth_above", "prior"}:
        parts.append(_group_procedure(p))
    if families & {"path", "depth_above"}:
        parts.append(_path_procedures(p))
        parts.append(_capped_procedure(p, "path"))
    if "path" in families:
        parts.append(_slant_depth_procedure(p))
    if "depth_above" in families:
        parts.append(slant_depth_above_procedure(p))
    if families & {"prior", "interception"}:
        parts.append(_area_procedures(p))
        parts.append(_capped_procedure(p, "area"))
    if "prior" in families:
        parts.append(_prior_procedures(p))
    if "interception" in families:
        parts.append(_interception_procedures(p))
    return _wrapped("".join(parts))


def _reach_argument(reach):
    """The trailing actual argument passing the host's cap (a Fortran expression), or nothing."""
    return "" if reach is None else f", slant_path_reach={reach}"


def slant_call(prefix, feature, out, reach=None):
    """One Fortran statement computing a slant-path feature of every own column into ``out``.

    The statement uses the dummy-argument names of ``NAME_host_features`` (the contract
    of ``fortran_features.py``) and the procedures of :func:`slant_procedures`.  The
    direct-beam priors of a recipe are best computed together by
    :func:`slant_priors_call`; this statement computes one of them alone.

    Parameters
    ----------
    prefix : str
        The Fortran model name.
    feature : str
        A name of :data:`SLANT_FEATURES`.
    out : str
        A Fortran array expression of shape ``(nx, ny)`` that receives the feature.
    reach : str, optional
        A Fortran real64 expression (e.g. ``"slant_path_reach"``, an optional dummy
        argument, which may be absent) passed as the cap of the paths' horizontal travel
        [m]; default none (no cap).

    Returns
    -------
    str
        The statement (continued over lines with ``&``), without a trailing newline.

    Raises
    ------
    surrogate3d.errors.ParameterError
        ``feature`` is not one of :data:`SLANT_FEATURES`.

    Examples
    --------
    >>> print(slant_call("boosted", "slant_optical_depth", "work"))
    call boosted_slant_depth(nx, ny, nz, hx, hy, dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge, &
        layer_optical_depth, 'slant_optical_depth', work)
    """
    family = _family(feature, SLANT_FEATURES)
    if family == "prior":
        return slant_priors_call(prefix, {feature: out}, reach)
    name = "slant_depth" if family == "path" else "interception"
    return _wrapped(f"call {prefix}_{name}({_CALL_HEAD}, &\n"
                    f"    layer_optical_depth, '{feature}', {out}{_reach_argument(reach)})")


def slant_depth_pair_call(prefix, out, minus_vertical, reach=None):
    """One Fortran statement computing ``slant_optical_depth`` and ``slant_minus_vertical_optical_depth`` together.

    The paths' sums are taken once for both features (two :func:`slant_call` statements
    would take them twice); the values are those of the two statements bit for bit.

    Parameters
    ----------
    prefix : str
        The Fortran model name.
    out, minus_vertical : str
        Fortran array expressions of shape ``(nx, ny)`` that receive ``slant_optical_depth``
        and ``slant_minus_vertical_optical_depth`` [1].
    reach : str, optional
        The cap of the paths' horizontal travel, as in :func:`slant_call`.

    Returns
    -------
    str
        The statement (continued over lines with ``&``), without a trailing newline;
        it uses the dummy-argument names of ``NAME_host_features``.

    Examples
    --------
    >>> print(slant_depth_pair_call("boosted", "a", "b"))
    call boosted_slant_depth(nx, ny, nz, hx, hy, dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge, &
        layer_optical_depth, 'slant_optical_depth', a, minus_vertical=b)
    """
    return _wrapped(f"call {prefix}_slant_depth({_CALL_HEAD}, &\n"
                    f"    layer_optical_depth, 'slant_optical_depth', {out}{_reach_argument(reach)}, "
                    f"minus_vertical={minus_vertical})")


def slant_priors_call(prefix, outs, reach=None):
    """One Fortran statement computing several direct-beam priors of every own column in one pass.

    The weights along the paths toward the sun, the crossed columns' statistics and the
    prior along the paths are computed once for all the features asked for (what
    :func:`slant_call` would do once per feature).

    Parameters
    ----------
    prefix : str
        The Fortran model name.
    outs : mapping of str to str
        Feature of :data:`PRIOR_FEATURES` -> a Fortran array expression of shape
        ``(nx, ny)`` that receives it.
    reach : str, optional
        The cap of the paths' horizontal travel, as in :func:`slant_call`.

    Returns
    -------
    str
        The statement (continued over lines with ``&``), without a trailing newline;
        it uses the dummy-argument names of ``NAME_host_features``.

    Raises
    ------
    surrogate3d.errors.ParameterError
        No feature, or one that is not in :data:`PRIOR_FEATURES`.

    Examples
    --------
    >>> print(slant_priors_call("boosted", {"direct_beam_prior": "a", "direct_beam_prior_slant_minus_vertical": "b"}))
    call boosted_direct_priors(nx, ny, nz, hx, hy, dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge, &
        layer_cloud_fraction, layer_optical_depth, layer_clear_sky_optical_depth, &
        total_cloud_fraction, column_optical_depth_std, cloud_edge_length, &
        independent_column_fluxes(:, :, 2), prior=a, slant_minus_vertical=b)
    """
    if not outs:
        raise ParameterError("outs names no direct-beam prior feature: give at least one of "
                             f"{sorted(PRIOR_FEATURES)}")
    for feature in outs:
        _family(feature, PRIOR_FEATURES)
    keywords = ", ".join(f"{_PRIOR_KEYWORD[feature]}={outs[feature]}" for feature in _PRIOR_KEYWORD
                         if feature in outs)
    return _wrapped(f"call {prefix}_direct_priors({_CALL_HEAD}, &\n"
                    "    layer_cloud_fraction, layer_optical_depth, layer_clear_sky_optical_depth, &\n"
                    "    total_cloud_fraction, column_optical_depth_std, cloud_edge_length, &\n"
                    f"    independent_column_fluxes(:, :, 2), {keywords}{_reach_argument(reach)})")


def slant_reach_call(prefix, feature, rx, ry, reach=None):
    """One Fortran statement setting the integers ``rx``, ``ry`` to the reach of a slant-path feature.

    The reach (columns along x and y the feature reads) equals
    :data:`surrogate3d.runtime.halo.REACH` for the geometry, whose dummy names the
    statement uses (``nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth``); it
    is ``huge()`` for a sun at or below the horizon or a cap that is negative or not
    finite (no halo suffices).  The called procedure is ``pure``.

    Parameters
    ----------
    prefix : str
        The Fortran model name.
    feature : str
        A name of :data:`SLANT_FEATURES` or ``"slant_optical_depth_above"``.
    rx, ry : str
        Names of integer variables.
    reach : str, optional
        The cap of the paths' horizontal travel, as in :func:`slant_call`
        (:func:`surrogate3d.runtime.halo.feature_reach` with ``slant_path_reach``).

    Returns
    -------
    str
        The statement, without a trailing newline.

    Raises
    ------
    surrogate3d.errors.ParameterError
        ``feature`` is not one of those names.

    Examples
    --------
    >>> print(slant_reach_call("boosted", "direct_beam_prior", "rx", "ry"))
    call boosted_area_reach(nz, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, rx, ry)
    """
    family = _family(feature, SLANT_FEATURES | {SLANT_DEPTH_ABOVE})
    return _wrapped(f"call {prefix}_{_REACH[family]}({_GEOMETRY_ARGS}, {rx}, {ry}{_reach_argument(reach)})")
