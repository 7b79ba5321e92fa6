"""The one-call host interface in generated Fortran: host fields with a halo in, corrected fluxes out.

For a column model ``NAME`` (all five column targets), :func:`host_module_text` writes
module ``NAME_host`` on top of ``NAME_correction`` (the model) and ``NAME_features`` (its
features from host fields, :mod:`surrogate3d.export.fortran_features`):

``NAME_correct_host``
    One call: features of the own columns of a sub-domain with a halo, the correction,
    the clear-sky gate, the envelope flag and the consistency step, returning corrected
    fluxes ready to use.  The energy balance of the consistency step is a sum over the
    whole periodic domain: on a decomposed grid pass ``sum_over_processes`` (e.g. a
    wrapper of an MPI all-reduce of two numbers); without it the sub-domain is taken to
    be the whole domain.  With a heating-rate model (``profile_model``, exported beside
    the column model) it also returns the correction of every layer, whose column sum
    replaces the column model's absorption correction in the consistency step and which
    is matched to the absorption that comes out (as ``surrogate3d evaluate`` scores it).
``NAME_host_corrections``, ``NAME_own_columns``, ``NAME_finish_host``
    The same in three steps, for a host that reduces the energy sums itself (the
    example driver runs four sub-domains in one program this way); ``NAME_finish_host``
    (balance and layers matched) exists with a heating-rate model, and without one the
    last step is ``NAME_balance_columns`` of ``NAME_correction``.

:func:`host_driver_text` writes ``NAME_host_driver.f90``, an example program that reads
host field files (:mod:`surrogate3d.runtime.host_field_file`, written by
``surrogate3d host-fields``) and prints the corrected fluxes of every own column.
"""

from ..core.coefficient_format import PROFILE_FIELD
from ..core.data_model import TARGETS
from ..errors import ValidationError

#: Dummy arguments shared with ``NAME_host_features`` (the host fields of a sub-domain with a halo).
FIELD_ARGUMENTS = ("nx, ny, nz, hx, hy, dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge, layer_cloud_fraction, "
                   "layer_optical_depth, layer_clear_sky_optical_depth, surface_albedo, total_cloud_fraction, "
                   "column_optical_depth_mean, column_optical_depth_std, cloud_edge_length, independent_column_fluxes")


#: The example drivers' stop on a non-zero status (shared by the longwave driver).
STOP_ON = """\
  !> Stop with the message on a non-zero status.
  subroutine stop_on(status, message)
    integer, intent(in) :: status
    character(len=*), intent(in) :: message
    if (status == 0) return
    write (error_unit, '(a)') trim(message)
    stop 1
  end subroutine stop_on
"""

#: The example drivers' optional ``--repeat N`` after the coefficient file(s), at argument ``first``.
REPEAT_ARGUMENT = """\
  n_repeat = 0
  call get_command_argument(first, argument)
  if (trim(argument) == '--repeat') then
    call get_command_argument(first + 1, argument)
    read (argument, *, iostat=status) n_repeat
    if (status /= 0 .or. n_repeat < 1) call stop_on(1, '--repeat needs a count >= 1')
    first = first + 2
  end if
"""


def _wrapped(text, indent):
    """A comma-separated argument list broken into Fortran continuation lines."""
    lines, line = [], ""
    for part in text.split(", "):
        piece = part if not line else line + ", " + part
        if len(indent + piece) > 100:
            lines.append(line + ", &")
            line = part
        else:
            line = piece
    lines.append(line)
    return ("\n" + indent).join(lines)


_FIELD_DECLARATIONS = """\
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge(nz + 1)
    real(real64), intent(in), dimension(1 - hx:nx + hx, 1 - hy:ny + hy, nz) :: layer_cloud_fraction, &
      layer_optical_depth, layer_clear_sky_optical_depth
    real(real64), intent(in), dimension(1 - hx:nx + hx, 1 - hy:ny + hy) :: surface_albedo, total_cloud_fraction, &
      column_optical_depth_mean, column_optical_depth_std, cloud_edge_length
    real(real64), intent(in) :: independent_column_fluxes(1 - hx:nx + hx, 1 - hy:ny + hy, {n_targets})"""


def shares_features(document, profile_document):
    """Whether a heating-rate model's column features are the column model's: the same columns of the same
    recipe (parameters included), so the host interface computes them once."""
    from ..runtime.model import CorrectionModel

    model, profile = CorrectionModel.from_document(document), CorrectionModel.from_document(profile_document)
    return (profile.column_feature_names == model.column_feature_names
            and profile.recipe.parameters == model.recipe.parameters)


def has_host_interface(document):
    """Whether a document gets a ``NAME_host`` module: a column model of all five column targets."""
    return (not (document.get(PROFILE_FIELD) or {}).get("layer_features")
            and list(document["targets"]["names"]) == list(TARGETS))


def host_module_text(prefix, document, profile_prefix=None, profile_document=None):
    """Text of module ``PREFIX_host`` (see the module docstring).

    Parameters
    ----------
    prefix : str
        Fortran name of the column model.
    document : dict
        Its checked coefficient document (:func:`has_host_interface` must hold).
    profile_prefix : str, optional
        Fortran name of a heating-rate model exported beside it.
    profile_document : dict, optional
        That model's document.

    Returns
    -------
    str
    """
    from .fortran_slant import SLANT_DEPTH_ABOVE, slant_reach_call

    n = len(TARGETS)
    absorbed = TARGETS.index("atmosphere_absorption") + 1
    fields = _FIELD_DECLARATIONS.format(n_targets=n)
    args = _wrapped(FIELD_ARGUMENTS, "      ")
    profile = profile_prefix is not None
    shared = profile and shares_features(document, profile_document)
    p = profile_prefix
    uses = ""
    optional_args, optional_decl, profile_steps, finish_profile = "", "", "", ""
    partial_check = """\
    if ((present(profile_model) .neqv. present(layers)) .or. &
        (present(layers) .neqv. present(independent_column_layer_absorption))) then
      status = 3
      message = 'profile_model, independent_column_layer_absorption and layers go together: give all three or none'
      return
    end if
""" if profile else ""
    layer_path_uses = f", &\n    {prefix}_slant_depth_above, {prefix}_path_reach" if profile else ""
    reach_call = (slant_reach_call(prefix, SLANT_DEPTH_ABOVE, "rx", "ry", reach="slant_path_reach")
                  .replace("\n", "\n      ") if profile else "")
    if profile:
        uses = (f"\n  use {p}_correction, only: {p}_coefficients, {p}_correct_profiles, {p}_match_column_integral, "
                f"&\n    {p}_n_column_features")
        if not shared:
            uses += f"\n  use {p}_features, only: {p}_host_features"
        optional_args = ", &\n      profile_model, independent_column_layer_absorption, layers"
        optional_decl = f"""
    type({p}_coefficients), intent(in), optional :: profile_model
    real(real64), intent(in), optional :: independent_column_layer_absorption(1 - hx:nx + hx, 1 - hy:ny + hy, nz)
    real(real64), intent(out), optional :: layers(nz, nx * ny)"""
        own_features = "features" if shared else "profile_features"
        profile_features_call = "" if shared else f"""
      call {p}_host_features({_wrapped(FIELD_ARGUMENTS, "        ")}, &
        profile_features, status, message, slant_path_reach)
      if (status /= 0) return"""
        profile_steps = f"""
    if (present(profile_model)) then
      {reach_call}
      if (rx > hx .or. ry > hy) then
        status = 1
        write (message, '(a, 2(i0, a), 2(i0, a))') 'feature slant_optical_depth_above (heating-rate layers) reads ', &
          rx, ' columns along x and ', ry, ' along y; the halo has ', hx, ' and ', hy, ''
        return
      end if{
        "" if shared else f'''
      allocate (profile_features({p}_n_column_features, nx * ny))'''}{profile_features_call}
      allocate (bottom(nz, nx * ny), top(nz, nx * ny), depth(nz, nx * ny), cover(nz, nx * ny), absorption(nz, nx * ny))
      allocate (slant(nz, nx * ny), cos_zenith(nx * ny))
      call layer_fields(nx, ny, nz, hx, hy, z_edge, layer_cloud_fraction, layer_optical_depth, &
                        independent_column_layer_absorption, bottom, top, depth, cover, absorption)
      call {prefix}_slant_depth_above(nx, ny, nz, hx, hy, dx, dy, solar_zenith_angle, solar_beam_azimuth, &
                                      z_edge, layer_optical_depth, slant, slant_path_reach)
      ! numpy.radians multiplies by pi / 180: the same rounding, so the layer features agree bit for bit.
      cos_zenith = cos(solar_zenith_angle * (acos(-1.0_real64) / 180.0_real64))
      call {p}_correct_profiles(profile_model, nx * ny, nz, {own_features}(1:{p}_n_column_features, :), cos_zenith, &
                              bottom, top, depth, cover, absorption, slant, layers)
      ! The gate's columns get no layer correction; the layers' sum is the column's absorption correction.
      do i = 1, nx * ny
        if (gated(i)) where (ieee_is_finite(layers(:, i))) layers(:, i) = 0.0_real64
        total = 0.0_real64
        do k = 1, nz
          if (.not. ieee_is_nan(layers(k, i))) total = total + layers(k, i)
        end do
        corrections({absorbed}, i) = total
      end do
    end if"""
        finish_profile = f"""
    if (present(layers) .and. present(independent_column_layer_absorption)) then
      allocate (absorption(nz, nx * ny))
      do iy = 1, ny
        do ix = 1, nx
          absorption(:, ix + (iy - 1) * nx) = independent_column_layer_absorption(ix, iy, :)
        end do
      end do
      call {p}_match_column_integral(nx * ny, nz, absorption, fluxes({absorbed}, :) - ica({absorbed}, :), layers)
    end if"""
    profile_locals = ""
    if profile:
        profile_locals = ("\n    real(real64), allocatable :: bottom(:, :), top(:, :), depth(:, :), cover(:, :), "
                          "absorption(:, :), slant(:, :)\n    real(real64), allocatable :: cos_zenith(:)"
                          + ("" if shared else ", profile_features(:, :)") + "\n    real(real64) :: total\n"
                          "    integer :: k, rx, ry")
    layer_fields_procedure = "" if not profile else """
  !> The layers of the own columns (bottom first) as the heating-rate model takes them.
  pure subroutine layer_fields(nx, ny, nz, hx, hy, z_edge, cloud_fraction, optical_depth, layer_absorption, bottom, &
                               top, depth, cover, absorption)
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: z_edge(nz + 1)
    real(real64), intent(in), dimension(1 - hx:nx + hx, 1 - hy:ny + hy, nz) :: cloud_fraction, optical_depth, &
      layer_absorption
    real(real64), intent(out), dimension(nz, nx * ny) :: bottom, top, depth, cover, absorption
    integer :: ix, iy, i
    do iy = 1, ny
      do ix = 1, nx
        i = ix + (iy - 1) * nx
        bottom(:, i) = z_edge(1:nz)
        top(:, i) = z_edge(2:nz + 1)
        depth(:, i) = optical_depth(ix, iy, :)
        cover(:, i) = cloud_fraction(ix, iy, :)
        absorption(:, i) = layer_absorption(ix, iy, :)
      end do
    end do
  end subroutine layer_fields
"""
    if profile:
        finish_call = (f"call {prefix}_finish_host(nx, ny, nz, hx, hy, ica, corrections, gated, sums(1), sums(2), "
                       "fluxes, &\n      independent_column_layer_absorption, layers)")
        finish_procedure = f"""
  !> Step 3, once need and have are summed over the domain ({prefix}_consistency_sums on every process): the
  !> corrected fluxes ({prefix}_balance_columns), and the layers matched to the corrected absorption.
  subroutine {prefix}_finish_host(nx, ny, nz, hx, hy, ica, corrections, gated, need, have, fluxes, &
      independent_column_layer_absorption, layers)
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: ica({prefix}_n_targets, nx * ny), corrections({prefix}_n_targets, nx * ny)
    logical, intent(in) :: gated(nx * ny)
    real(real64), intent(in) :: need, have
    real(real64), intent(out) :: fluxes({prefix}_n_targets, nx * ny)
    real(real64), intent(in), optional :: independent_column_layer_absorption(1 - hx:nx + hx, 1 - hy:ny + hy, nz)
    real(real64), intent(inout), optional :: layers(nz, nx * ny)
    real(real64), allocatable :: absorption(:, :)
    integer :: ix, iy
    call {prefix}_balance_columns(nx * ny, ica, corrections, gated, need, have, fluxes){finish_profile}
  end subroutine {prefix}_finish_host
"""
    else:
        finish_call = f"call {prefix}_balance_columns(nx * ny, ica, corrections, gated, sums(1), sums(2), fluxes)"
        finish_procedure = ""
    profile_doc = "" if not profile else f"""
  !> With profile_model (the heating-rate model {p}), independent_column_layer_absorption (the host's own
  !> absorption of every layer [1]) and layers, layers(k, i) returns the correction of layer k (bottom first)
  !> of own column i; their sum replaces the absorption correction in the consistency step, and they are
  !> matched to the absorption that comes out."""
    return f"""\
! Generated by surrogate3d export: the one-call host interface of the 3D correction "{document['model']['name']}".
! Host fields of a sub-domain with a halo in (the arguments of {prefix}_host_features), corrected fluxes out.
module {prefix}_host
  use, intrinsic :: iso_fortran_env, only: real64
  use, intrinsic :: ieee_arithmetic, only: ieee_is_finite, ieee_is_nan
  use {prefix}_correction
  use {prefix}_features, only: {prefix}_host_features, {prefix}_n_host_features{layer_path_uses}{uses}
  implicit none
  private
  public :: {prefix}_correct_host, {prefix}_host_corrections, {prefix}_own_columns{
        f", {prefix}_finish_host" if profile else ""}

  !> Adds values over all processes of the periodic domain in place (e.g. with MPI_Allreduce).
  abstract interface
    subroutine {prefix}_sum_over_processes(values)
      import :: real64
      real(real64), intent(inout) :: values(:)
    end subroutine {prefix}_sum_over_processes
  end interface
  public :: {prefix}_sum_over_processes

contains

  !> Corrected fluxes [1] (fractions of the incident flux on the horizontal, targets as {prefix}_target_names) of
  !> the own columns of a sub-domain with a halo: features, correction, clear-sky gate, envelope flag and the
  !> consistency step. fluxes(:, i) is own column i = ix + (iy - 1) * nx; outside(i) flags a column outside the
  !> training envelope, n_outside counts them. On a decomposed domain, sum_over_processes adds the energy sums
  !> over the processes. status /= 0 and message say what is wrong with the input (nothing else is set).{profile_doc}
  subroutine {prefix}_correct_host(model, {args}, &
      fluxes, outside, n_outside, status, message, sum_over_processes{optional_args}, slant_path_reach)
    type({prefix}_coefficients), intent(in) :: model
{fields}
    real(real64), intent(out) :: fluxes({prefix}_n_targets, nx * ny)
    logical, intent(out) :: outside(nx * ny)
    integer, intent(out) :: n_outside, status
    character(len=*), intent(out) :: message
    procedure({prefix}_sum_over_processes), optional :: sum_over_processes{optional_decl}
    real(real64), intent(in), optional :: slant_path_reach
    real(real64) :: corrections({prefix}_n_targets, nx * ny), ica({prefix}_n_targets, nx * ny), albedo(nx * ny)
    real(real64) :: sums(2)
    logical :: gated(nx * ny)
    call {prefix}_host_corrections(model, {args}, &
      corrections, gated, outside, n_outside, status, message{optional_args}, slant_path_reach)
    if (status /= 0) return
    call {prefix}_own_columns(nx, ny, hx, hy, independent_column_fluxes, surface_albedo, ica, albedo)
    sums = 0.0_real64
    call {prefix}_consistency_sums(nx * ny, ica, corrections, albedo, gated, sums(1), sums(2))
    if (present(sum_over_processes)) call sum_over_processes(sums)
    {finish_call}
  end subroutine {prefix}_correct_host

  !> Step 1 of {prefix}_correct_host: the raw corrections of the own columns (gate and, with a heating-rate model,
  !> its layers applied), the gate's columns and the envelope flags.
  subroutine {prefix}_host_corrections(model, {args}, &
      corrections, gated, outside, n_outside, status, message{optional_args}, slant_path_reach)
    type({prefix}_coefficients), intent(in) :: model
{fields}
    real(real64), intent(out) :: corrections({prefix}_n_targets, nx * ny)
    logical, intent(out) :: gated(nx * ny), outside(nx * ny)
    integer, intent(out) :: n_outside, status
    character(len=*), intent(out) :: message{optional_decl}
    real(real64), intent(in), optional :: slant_path_reach
    real(real64), allocatable :: features(:, :){profile_locals}
    integer :: i
{partial_check}    allocate (features({prefix}_n_host_features, nx * ny))
    call {prefix}_host_features({_wrapped(FIELD_ARGUMENTS, "      ")}, &
      features, status, message, slant_path_reach)
    if (status /= 0) return
    call {prefix}_correct_columns(model, nx * ny, features, corrections, outside, n_outside)
    do i = 1, nx * ny
      gated(i) = {prefix}_clear_sky_column(model, features(:, i))
    end do{profile_steps}
  end subroutine {prefix}_host_corrections

  !> Step 2: the host's independent-column fluxes and surface albedo of the own columns, as the consistency
  !> step ({prefix}_consistency_sums) takes them.
  pure subroutine {prefix}_own_columns(nx, ny, hx, hy, independent_column_fluxes, surface_albedo, ica, albedo)
    integer, intent(in) :: nx, ny, hx, hy
    real(real64), intent(in) :: independent_column_fluxes(1 - hx:nx + hx, 1 - hy:ny + hy, {prefix}_n_targets)
    real(real64), intent(in) :: surface_albedo(1 - hx:nx + hx, 1 - hy:ny + hy)
    real(real64), intent(out) :: ica({prefix}_n_targets, nx * ny), albedo(nx * ny)
    integer :: ix, iy
    do iy = 1, ny
      do ix = 1, nx
        ica(:, ix + (iy - 1) * nx) = independent_column_fluxes(ix, iy, :)
        albedo(ix + (iy - 1) * nx) = surface_albedo(ix, iy)
      end do
    end do
  end subroutine {prefix}_own_columns

{finish_procedure}{layer_fields_procedure}
end module {prefix}_host
"""


def _either(profile, call, profile_tail, indent, close=")"):
    """A statement, and with a heating-rate model the same with ``profile_tail`` when ``--profile`` was given."""
    def indented(text):
        return "\n".join(indent + ("  " if i else "") + line for i, line in enumerate(text.splitlines()))
    plain = call + close
    if not profile:
        return indented(plain)
    inner = indent + "  "

    def deeper(text):
        return "\n".join(inner + ("  " if i else "") + line for i, line in enumerate(text.splitlines()))
    return (f"{indent}if (with_profile) then\n{deeper(call + profile_tail)}\n{indent}else\n{deeper(plain)}\n"
            f"{indent}end if")


def host_driver_text(prefix, profile_prefix=None):
    """Text of the example program ``PREFIX_host_driver`` (see the module docstring).

    Usage of the program: ``PREFIX_host_driver COEFFICIENTS [--profile PROFILE_COEFFICIENTS]
    HOST_FIELD_FILE...``.  With one file (the whole periodic domain, its halo filled by
    wrapping) it makes the one call ``PREFIX_correct_host``; with several (the sub-domains
    of one domain) it runs them as the processes of a decomposed host would: step 1 and the
    energy sums on each, the sums added (the all-reduce), the last step on each.  It prints
    one line per own column: the column's 1-based indices in the whole domain, the
    corrected fluxes and, with a heating-rate model, the layer corrections.
    """
    p = profile_prefix
    profile = p is not None
    uses = f"\n  use {p}_correction, only: {p}_coefficients, {p}_read_coefficients" if profile else ""
    profile_decl = f"\n  type({p}_coefficients) :: profile_model" if profile else ""
    read_profile = f"""
  if (with_profile) then
    call {p}_read_coefficients(trim(profile_path), profile_model, status, message)
    call stop_on(status, message)
  end if""" if profile else ""
    layers_alloc = "\n      allocate (d%layers(d%nz, d%nx * d%ny))" if profile else ""
    one_call = _either(profile, f"""call {prefix}_correct_host(model, d%nx, d%ny, d%nz, d%hx, d%hy, d%dx, d%dy, d%zenith, \
d%azimuth, d%z_edge, &
  d%cloud_fraction, d%optical_depth, d%clear_sky, d%albedo, d%cover, d%depth_mean, d%depth_std, d%edge_length, &
  d%ica, d%fluxes, d%outside, n_outside, status, message""", """, layers=d%layers, profile_model=profile_model, &
  independent_column_layer_absorption=d%layer_absorption, slant_path_reach=d%reach)""", "      ",
                       close=", slant_path_reach=d%reach)")
    corrections_call = _either(profile, f"""call {prefix}_host_corrections(model, d%nx, d%ny, d%nz, d%hx, d%hy, d%dx, d%dy, \
d%zenith, d%azimuth, &
  d%z_edge, d%cloud_fraction, d%optical_depth, d%clear_sky, d%albedo, d%cover, d%depth_mean, d%depth_std, &
  d%edge_length, d%ica, d%corrections, d%gated, d%outside, n_outside, status, message""", """, &
  profile_model, d%layer_absorption, d%layers, slant_path_reach=d%reach)""", "        ",
                               close=", &\n  slant_path_reach=d%reach)")
    layers_alloc_time = "\n    allocate (d%layers(d%nz, d%nx * d%ny))" if profile else ""
    corrections_call_time = "\n".join("  " + line for line in corrections_call.splitlines())
    balance = (f"call {prefix}_balance_columns(d%nx * d%ny, d%ica_own, d%corrections, d%gated, sums(1), sums(2), "
               "d%fluxes)")
    finish = "        " + balance if not profile else f"""\
        if (with_profile) then
          call {prefix}_finish_host(d%nx, d%ny, d%nz, d%hx, d%hy, d%ica_own, d%corrections, d%gated, sums(1), &
                                 sums(2), d%fluxes, d%layer_absorption, d%layers)
        else
          {balance}
        end if"""
    row = """write (*, '(2i7, *(1x, es25.17e3))') d%ix0 + mod(i - 1, d%nx) + 1, d%iy0 + (i - 1) / d%nx + 1, &
  d%fluxes(:, i)"""
    write_row = _either(profile, row, ", d%layers(:, i)", "        ", close="")
    no_profile_guard = "" if profile else """
  if (with_profile) call stop_on(1, 'this model was exported without a heating-rate model')"""
    return f"""\
! Generated by surrogate3d export: example driver of the one-call host interface {prefix}_host.
! Usage: {prefix}_host_driver COEFFICIENTS [--profile PROFILE_COEFFICIENTS] HOST_FIELD_FILE...
! The host field files are written by 'surrogate3d host-fields' (docs/host-model-guide.md). One file: the
! whole periodic domain, corrected in one call. Several: the sub-domains of one domain, run as the processes
! of a decomposed host (step 1 and the energy sums on each, the sums added as an all-reduce would, the last
! step on each). Prints per own column: ix iy (1-based, whole domain), the corrected fluxes [1]{
        chr(10) + "! and the layer corrections [1], bottom first" if profile else ""}.
program {prefix}_host_driver
  use, intrinsic :: iso_fortran_env, only: real64, int64, error_unit
  use, intrinsic :: ieee_arithmetic, only: ieee_is_finite, ieee_is_nan
  use {prefix}_correction
  use {prefix}_host{uses}
  implicit none

  !> One sub-domain's host fields (with their halo) and results.
  type :: subdomain
    integer :: nx, ny, nz, hx, hy, ix0, iy0, nx_domain, ny_domain
    real(real64) :: dx, dy, zenith, azimuth
    real(real64), allocatable :: reach     ! the cap on the slant paths' reach [m]; unallocated: none
    real(real64), allocatable :: z_edge(:), cloud_fraction(:, :, :), optical_depth(:, :, :), clear_sky(:, :, :)
    real(real64), allocatable :: albedo(:, :), cover(:, :), depth_mean(:, :), depth_std(:, :), edge_length(:, :)
    real(real64), allocatable :: ica(:, :, :), layer_absorption(:, :, :)
    real(real64), allocatable :: corrections(:, :), fluxes(:, :), ica_own(:, :), albedo_own(:), layers(:, :)
    logical, allocatable :: gated(:), outside(:)
  end type subdomain

  type({prefix}_coefficients) :: model{profile_decl}
  type(subdomain), allocatable :: parts(:)
  character(len=1024) :: coefficients_path, profile_path, argument
  character(len=1024) :: message
  integer :: status, n_args, first, n_parts, j, i, n_outside, n_repeat
  real(real64) :: sums(2)
  logical :: with_profile

  n_args = command_argument_count()
  if (n_args < 2) call stop_on(1, 'usage: {prefix}_host_driver COEFFICIENTS [--profile PROFILE_COEFFICIENTS] ' // &
                                 '[--repeat N] FILE...')
  call get_command_argument(1, coefficients_path)
  call get_command_argument(2, argument)
  with_profile = trim(argument) == '--profile'
  first = 2
  if (with_profile) then
    call get_command_argument(3, profile_path)
    first = 4
  end if{no_profile_guard}
{REPEAT_ARGUMENT}  n_parts = n_args - first + 1
  if (n_parts < 1) call stop_on(1, 'no host field file given')
  call {prefix}_read_coefficients(trim(coefficients_path), model, status, message)
  call stop_on(status, message){read_profile}
  allocate (parts(n_parts))
  do j = 1, n_parts
    call get_command_argument(first + j - 1, argument)
    call read_host_fields(trim(argument), parts(j))
  end do
  call check_cover(parts)

  if (n_repeat > 0) then
    call time_corrections(parts(1))
    stop
  end if

  if (n_parts == 1) then
    associate (d => parts(1))
      allocate (d%fluxes({prefix}_n_targets, d%nx * d%ny), d%outside(d%nx * d%ny)){layers_alloc}
{one_call}
      call stop_on(status, message)
    end associate
  else
    sums = 0.0_real64
    do j = 1, n_parts
      associate (d => parts(j))
        allocate (d%corrections({prefix}_n_targets, d%nx * d%ny), d%fluxes({prefix}_n_targets, d%nx * d%ny))
        allocate (d%gated(d%nx * d%ny), d%outside(d%nx * d%ny), d%ica_own({prefix}_n_targets, d%nx * d%ny))
        allocate (d%albedo_own(d%nx * d%ny)){layers_alloc}
{corrections_call}
        call stop_on(status, message)
        call {prefix}_own_columns(d%nx, d%ny, d%hx, d%hy, d%ica, d%albedo, d%ica_own, d%albedo_own)
        ! Each process adds its columns' shares; a decomposed host sums them over processes (all-reduce).
        call {prefix}_consistency_sums(d%nx * d%ny, d%ica_own, d%corrections, d%albedo_own, d%gated, sums(1), sums(2))
      end associate
    end do
    do j = 1, n_parts
      associate (d => parts(j))
{finish}
      end associate
    end do
  end if

  do j = 1, n_parts
    associate (d => parts(j))
      do i = 1, d%nx * d%ny
{write_row}
      end do
    end associate
  end do

contains

  !> With --repeat N: the features and the prediction (step 1, {prefix}_host_corrections{
        ", with the heating-rate layers if --profile" if profile else ""})
  !> of the first file's columns, N sweeps timed, best of three; prints key value lines (the checksum keeps
  !> the compiler from skipping sweeps).
  subroutine time_corrections(d)
    type(subdomain), intent(inout) :: d
    integer(int64) :: start, finish, rate
    integer :: sweep, trial
    real(real64) :: best, checksum
    allocate (d%corrections({prefix}_n_targets, d%nx * d%ny), d%gated(d%nx * d%ny), d%outside(d%nx * d%ny)){
        layers_alloc_time}
    best = huge(1.0_real64)
    checksum = 0.0_real64
    do trial = 1, 3
      call system_clock(start, rate)
      do sweep = 1, n_repeat
{corrections_call_time}
        call stop_on(status, message)
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

  !> Stop unless the files' own columns cover their whole domain once each (one energy balance per domain).
  subroutine check_cover(parts)
    type(subdomain), intent(in) :: parts(:)
    integer, allocatable :: seen(:, :)
    integer :: j, ix, iy
    character(len=160) :: text
    allocate (seen(parts(1)%nx_domain, parts(1)%ny_domain))
    seen = 0
    do j = 1, size(parts)
      associate (d => parts(j))
        if (d%nx_domain /= size(seen, 1) .or. d%ny_domain /= size(seen, 2) .or. d%ix0 < 0 .or. d%iy0 < 0 .or. &
            d%ix0 + d%nx > size(seen, 1) .or. d%iy0 + d%ny > size(seen, 2)) then
          call stop_on(1, 'the host field files are not sub-domains of one domain')
        end if
        seen(d%ix0 + 1:d%ix0 + d%nx, d%iy0 + 1:d%iy0 + d%ny) = seen(d%ix0 + 1:d%ix0 + d%nx, d%iy0 + 1:d%iy0 + d%ny) + 1
      end associate
    end do
    do iy = 1, size(seen, 2)
      do ix = 1, size(seen, 1)
        if (seen(ix, iy) /= 1) then
          write (text, '(a, i0, a, i0, a, i0, a)') 'column (', ix, ', ', iy, ') of the domain is in ', seen(ix, iy), &
            ' of the host field files; each must be in exactly one'
          call stop_on(1, trim(text))
        end if
      end do
    end do
  end subroutine check_cover

{STOP_ON}
  !> Read one host field file (surrogate3d.runtime.host_field_file) into d, arrays indexed with their halo.
  subroutine read_host_fields(path, d)
    character(len=*), intent(in) :: path
    type(subdomain), intent(out) :: d
    integer :: unit, ios, count
    real(real64) :: cap
    character(len=64) :: key
    character(len=256) :: line
    open (newunit=unit, file=path, status='old', action='read', iostat=ios)
    if (ios /= 0) call stop_on(1, 'cannot open host field file ' // path)
    read (unit, '(a)') line
    if (trim(line) /= 'surrogate3d host fields 2') call stop_on(1, path // ' is not a host field file of version 2')
    read (unit, *) key, d%nx, d%ny, d%nz, d%hx, d%hy
    read (unit, *) key, d%ix0, d%iy0
    read (unit, *) key, d%nx_domain, d%ny_domain
    read (unit, *) key, d%dx
    read (unit, *) key, d%dy
    read (unit, *) key, d%zenith
    read (unit, *) key, d%azimuth
    read (unit, *) key, cap
    if (ieee_is_finite(cap)) then
      d%reach = cap
    else if (ieee_is_nan(cap) .or. cap < 0.0_real64) then
      call stop_on(1, path // ': slant_path_reach must be a distance >= 0 in m or inf (no cap)')
    end if
    associate (nx => d%nx, ny => d%ny, nz => d%nz, hx => d%hx, hy => d%hy)
      allocate (d%z_edge(nz + 1))
      allocate (d%cloud_fraction(1 - hx:nx + hx, 1 - hy:ny + hy, nz), d%optical_depth(1 - hx:nx + hx, 1 - hy:ny + hy, nz))
      allocate (d%clear_sky(1 - hx:nx + hx, 1 - hy:ny + hy, nz), d%layer_absorption(1 - hx:nx + hx, 1 - hy:ny + hy, nz))
      allocate (d%albedo(1 - hx:nx + hx, 1 - hy:ny + hy), d%cover(1 - hx:nx + hx, 1 - hy:ny + hy))
      allocate (d%depth_mean(1 - hx:nx + hx, 1 - hy:ny + hy), d%depth_std(1 - hx:nx + hx, 1 - hy:ny + hy))
      allocate (d%edge_length(1 - hx:nx + hx, 1 - hy:ny + hy), d%ica(1 - hx:nx + hx, 1 - hy:ny + hy, {len(TARGETS)}))
    end associate
    read (unit, *) key, count
    read (unit, *) d%z_edge
    read (unit, *) key, count
    read (unit, *) d%cloud_fraction
    read (unit, *) key, count
    read (unit, *) d%optical_depth
    read (unit, *) key, count
    read (unit, *) d%clear_sky
    read (unit, *) key, count
    read (unit, *) d%albedo
    read (unit, *) key, count
    read (unit, *) d%cover
    read (unit, *) key, count
    read (unit, *) d%depth_mean
    read (unit, *) key, count
    read (unit, *) d%depth_std
    read (unit, *) key, count
    read (unit, *) d%edge_length
    read (unit, *) key, count
    read (unit, *) d%ica
    read (unit, *) key, count
    read (unit, *, iostat=ios) d%layer_absorption
    if (ios /= 0) call stop_on(1, 'host field file ' // path // ' is truncated')
    close (unit)
  end subroutine read_host_fields
end program {prefix}_host_driver
"""


def host_files(document, profile_document=None):
    """``{file name: text}`` of the host interface of a column model: its features module, ``NAME_host``, the
    example driver, the halo statement ``NAME_halo.md`` (:mod:`surrogate3d.export.halo_statement`) and the
    heating-rate model's features module when its features differ.

    Parameters
    ----------
    document : dict
        A checked coefficient document of a column model (:func:`has_host_interface`).
    profile_document : dict, optional
        The document of a heating-rate model exported beside it.

    Returns
    -------
    dict of str -> str
    """
    from ..runtime.model import CorrectionModel
    from .fortran import fortran_name
    from .fortran_features import features_module_text
    from .halo_statement import halo_statement

    prefix = fortran_name(document["model"]["name"])
    model = CorrectionModel.from_document(document)
    # With a heating-rate model the column model's features module also gives the layers' slant paths.
    files = {f"{prefix}_features.f90": features_module_text(prefix, model.recipe, model.column_feature_names,
                                                          layer_paths=profile_document is not None)}
    profile_prefix = None
    if profile_document is not None:
        profile_prefix = fortran_name(profile_document["model"]["name"])
        profile = CorrectionModel.from_document(profile_document)
        if not shares_features(document, profile_document):
            files[f"{profile_prefix}_features.f90"] = features_module_text(profile_prefix, profile.recipe,
                                                                           profile.column_feature_names)
    files[f"{prefix}_host.f90"] = host_module_text(prefix, document, profile_prefix, profile_document)
    files[f"{prefix}_host_driver.f90"] = host_driver_text(prefix, profile_prefix)
    files[f"{prefix}_halo.md"] = halo_statement(model.name, model.recipe, model.column_feature_names)
    for name, text in files.items():
        long = [i + 1 for i, line in enumerate(text.splitlines()) if len(line) > 132 and name.endswith(".f90")]
        if long:
            raise ValidationError(f"generated {name} has lines longer than 132 characters at {long[:5]}")
    return files
