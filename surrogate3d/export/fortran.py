"""A Fortran 2008 module, a driver program and data files for one exported model.

For a model named ``NAME`` (made a Fortran name: lower case, ``_`` for other
characters), :func:`write_fortran` writes into a directory:

``NAME_correction.f90``
    Module ``NAME_correction``: the model's feature and target names as parameters, a
    derived type ``NAME_coefficients``, ``NAME_read_coefficients`` (reads and checks the
    data file), and the pure procedures ``NAME_correct_column`` (one column's features
    to its corrections) and ``NAME_correct_columns`` (many columns), which apply the
    model's clear-sky gate (zero correction where every gate feature is within the
    tolerance of 0), and ``NAME_check_column``, which flags a column outside the training
    envelope (``NAME_correct_columns`` flags and counts them on request).  Standard
    Fortran 2008, no dependencies but the intrinsic modules ``iso_fortran_env`` and
    ``ieee_arithmetic``.
``NAME_correction_driver.f90``
    Example program: reads sample features from a text file, prints the corrections
    (or, given ``envelope``, each column's envelope flag and distance; given a repeat
    count, the columns per second).
``NAME.coefficients.txt``
    The coefficients, the clear-sky gate and the training envelope as plain text (every
    number in shortest round-trip decimal form, so the doubles read back exactly).
``NAME_sample_features.txt``, ``NAME_sample_corrections.txt``
    Feature vectors of training columns and the corrections the Python runtime gives
    for them, to check a build against.

The coefficients are read from the text file rather than embedded as parameter
arrays: an ensemble of 1500 trees has ~10^5 nodes, which as array constructors makes a
multi-megabyte source that compilers are slow to build (gfortran also caps
constructors at 65535 elements by default); read once at start-up, the arrays are
just as fast, and a retrained model of the same features needs no recompilation.
``docs/host-model-guide.md`` shows how to call the module.
"""

import re
from pathlib import Path

import numpy as np

from .._atomic import write_text_atomic
from ..errors import FormatError, ValidationError
from ..core.config import NEAR_CONSTANT
from ..core.coefficient_format import (ENVELOPE_FIELD, FORMAT_NAME, FORMAT_VERSION, OUTSIDE_ENVELOPE_VERSION,
                                       PROFILE_FIELD, RIDGE_CLIPPING_VERSION, clear_sky_gate, target_transforms)
from ..core.data_model import TARGETS
from ..pairs.layer_features import EXTINCTION_FLOOR, LAYER_FEATURES, SAME_PATH_TOLERANCE
from ..pairs.longwave_layer_features import LONGWAVE_LAYER_FEATURES

#: Numbers per line in the data files.
_PER_LINE = 6

#: Fortran statements stay below the 132-character line limit of free form.
_LINE_LIMIT = 132


def fortran_name(model_name):
    """A Fortran name from a model name: lower case, other characters as ``_``, starting with a letter."""
    name = re.sub(r"[^a-z0-9_]", "_", model_name.lower())
    if not name[:1].isalpha():
        name = "m_" + name
    return name[:40]


def _number(value):
    value = float(value)
    if np.isinf(value):
        return "Infinity" if value > 0 else "-Infinity"
    return repr(value)


def _lines(values, integer=False):
    flat = np.asarray(values).ravel()
    text = [str(int(v)) for v in flat] if integer else [_number(v) for v in flat]
    return [" ".join(text[i:i + _PER_LINE]) for i in range(0, len(text), _PER_LINE)]


def data_file_text(document):
    """Text of the Fortran data file (``NAME.coefficients.txt``) of a document, headed by the
    document's own format version (the module generated from it evaluates that version)."""
    kind = document["model"]["kind"]
    arrays = document[kind]
    features, targets = document["features"]["names"], document["targets"]["names"]
    gate, tolerance = clear_sky_gate(document)
    envelope = document.get(ENVELOPE_FIELD)
    n_components = 0 if envelope is None else envelope["components"].shape[0]
    transforms = [spec or {"scale_feature": -1, "scale_floor": 0.0, "offset_features": [], "offset_coefficients": []}
                  for spec in target_transforms(document)]
    offsets = [(m, k, c) for m, spec in enumerate(transforms)
               for k, c in zip(spec["offset_features"], spec["offset_coefficients"])]
    lines = [f"{FORMAT_NAME} {document['format_version']}", f"kind {kind}", f"model {document['model']['name']}",
             f"n_features {len(features)}", f"n_targets {len(targets)}", f"n_clear_sky_features {len(gate)}",
             f"n_envelope_components {n_components}", f"n_offset_terms {len(offsets)}"]
    if kind == "ridge":
        lines.append(f"n_pairs {arrays['interaction_pairs'].shape[0]}")
        order = ("feature_mean", "feature_scale", "interaction_pairs", "coef", "intercept")
    else:
        lines += [f"n_trees {arrays['tree_target'].size}", f"n_nodes {arrays['feature'].size}",
                  f"n_leaves {arrays['leaf_value'].size}", f"n_thresholds {arrays['threshold_values'].size}"]
        order = ("baseline", "tree_target", "tree_offset", "feature", "threshold_index", "left", "right",
                 "missing_go_left", "leaf_value", "threshold_values")
    lines += ["features", *features, "targets", *targets]
    for name in order:
        lines.append(name)
        lines += _lines(arrays[name], integer=arrays[name].dtype.kind == "i")
    lines += ["clear_sky_features", *_lines(gate, integer=True), "clear_sky_tolerance", _number(tolerance)]
    if envelope is not None:
        for name in _ENVELOPE_SECTIONS:
            lines.append(f"envelope_{name}")
            lines += _lines(envelope[name])
    lines += ["target_scale_feature", *_lines([t["scale_feature"] for t in transforms], integer=True),
              "target_scale_floor", *_lines([t["scale_floor"] for t in transforms]),
              "offset_target", *_lines([o[0] for o in offsets], integer=True),
              "offset_feature", *_lines([o[1] for o in offsets], integer=True),
              "offset_coefficient", *_lines([o[2] for o in offsets])]
    if tuple(int(v) for v in document["format_version"].split(".")) >= OUTSIDE_ENVELOPE_VERSION:
        lines += ["target_offset_outside", *_lines([int(t.get("outside_envelope") == "offset") for t in transforms],
                                                   integer=True)]
    return "\n".join(lines) + "\n"


def _names_parameter(name, count_name, values):
    width = max(len(v) for v in values)
    rows = [f'       "{v}"' for v in values]
    body = ", &\n".join(rows)
    return (f"  character(len={width}), parameter, public :: {name}({count_name}) = [character(len={width}) :: &\n"
            f"{body}]")


_COMMON_READERS = """\
  subroutine next_line(unit, line, status, message)
    integer, intent(in) :: unit
    character(len=*), intent(out) :: line
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    integer :: ios
    if (status /= 0) return
    read (unit, '(a)', iostat=ios) line
    if (ios /= 0) then
      status = 1
      message = 'coefficient file ends early or cannot be read'
    end if
  end subroutine next_line

  subroutine expect_line(unit, expected, status, message)
    integer, intent(in) :: unit
    character(len=*), intent(in) :: expected
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    character(len=line_length) :: line
    call next_line(unit, line, status, message)
    if (status /= 0) return
    if (trim(adjustl(line)) /= expected) then
      status = 1
      message = 'coefficient file: expected "' // expected // '", found "' // trim(line) // '"'
    end if
  end subroutine expect_line

  subroutine expect_count(unit, key, expected, status, message)
    integer, intent(in) :: unit
    character(len=*), intent(in) :: key
    integer, intent(in) :: expected
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    integer :: value
    call read_count(unit, key, value, status, message)
    if (status /= 0) return
    if (value /= expected) then
      status = 1
      write (message, '(a, a, i0, a, i0)') key, ' is ', value, ' in the coefficient file; this module expects ', expected
    end if
  end subroutine expect_count

  subroutine read_count(unit, key, value, status, message)
    integer, intent(in) :: unit
    character(len=*), intent(in) :: key
    integer, intent(out) :: value
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    character(len=line_length) :: line
    integer :: ios
    value = 0
    call next_line(unit, line, status, message)
    if (status /= 0) return
    line = adjustl(line)
    if (line(1:len(key) + 1) /= key // ' ') then
      status = 1
      message = 'coefficient file: expected "' // key // ' N", found "' // trim(line) // '"'
      return
    end if
    read (line(len(key) + 1:), *, iostat=ios) value
    if (ios /= 0 .or. value < 0) then
      status = 1
      message = 'coefficient file: bad count in "' // trim(line) // '"'
    end if
  end subroutine read_count

  subroutine expect_names(unit, section, names, status, message)
    integer, intent(in) :: unit
    character(len=*), intent(in) :: section
    character(len=*), intent(in) :: names(:)
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    character(len=line_length) :: line
    integer :: i
    call expect_line(unit, section, status, message)
    do i = 1, size(names)
      call next_line(unit, line, status, message)
      if (status /= 0) return
      if (trim(adjustl(line)) /= trim(names(i))) then
        status = 1
        write (message, '(a, a, i0, a, a, a, a, a)') section, ' entry ', i, ' is "', trim(line), &
            '" in the coefficient file; this module was generated for "', trim(names(i)), '"'
        return
      end if
    end do
  end subroutine expect_names

  subroutine read_reals(unit, section, values, status, message)
    integer, intent(in) :: unit
    character(len=*), intent(in) :: section
    real(real64), intent(out) :: values(:)
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    integer :: ios
    values = 0.0_real64
    call expect_line(unit, section, status, message)
    ! An empty array has no lines (a read with an empty list would still skip one).
    if (status /= 0 .or. size(values) == 0) return
    read (unit, *, iostat=ios) values
    if (ios /= 0) then
      status = 1
      message = 'coefficient file: cannot read the values of ' // section
    end if
  end subroutine read_reals

  subroutine read_integers(unit, section, values, status, message)
    integer, intent(in) :: unit
    character(len=*), intent(in) :: section
    integer(int32), intent(out) :: values(:)
    integer, intent(inout) :: status
    character(len=*), intent(inout) :: message
    integer :: ios
    values = 0
    call expect_line(unit, section, status, message)
    ! An empty array has no lines (a read with an empty list would still skip one).
    if (status /= 0 .or. size(values) == 0) return
    read (unit, *, iostat=ios) values
    if (ios /= 0) then
      status = 1
      message = 'coefficient file: cannot read the values of ' // section
    end if
  end subroutine read_integers

  subroutine open_coefficients(path, kind, unit, minor, status, message)
    character(len=*), intent(in) :: path, kind
    integer, intent(out) :: unit
    integer, intent(out) :: minor   ! the file's minor format version (what it asks of the evaluation)
    character(len=*), intent(inout) :: message
    integer, intent(inout) :: status
    character(len=line_length) :: line
    integer :: ios, dot
    ! -1 is never a NEWUNIT= value: it marks a file that could not be opened.
    unit = -1
    minor = 0
    open (newunit=unit, file=path, status='old', action='read', iostat=ios)
    if (ios /= 0) then
      unit = -1
      status = 1
      message = 'cannot open coefficient file ' // path
      return
    end if
    call next_line(unit, line, status, message)
    if (status /= 0) return
    line = adjustl(line)
    dot = index(line, '.')
    if (line(1:len(format_name) + 1) /= format_name // ' ' .or. dot == 0) then
      status = 1
      message = path // ' is not a surrogate3d coefficient file'
    else if (line(len(format_name) + 2:dot - 1) /= format_major) then
      status = 1
      message = path // ' has format version ' // trim(line(len(format_name) + 2:)) // &
          '; this module reads major version ' // format_major
    else
      read (line(dot + 1:), *, iostat=ios) minor
      if (ios /= 0) then
        status = 1
        message = path // ' has format version ' // trim(line(len(format_name) + 2:)) // '; expected MAJOR.MINOR'
      end if
    end if
    call expect_line(unit, 'kind ' // kind, status, message)
    call next_line(unit, line, status, message)   ! the model name, for people reading the file
  end subroutine open_coefficients
"""


#: Sections of the training envelope in the data file, in order (after the clear-sky gate).
_ENVELOPE_SECTIONS = ("feature_min", "feature_max", "center", "scale", "components", "component_variance",
                      "residual_variance", "distance_threshold")

#: Components of the coefficient type that hold the clear-sky gate and the training envelope.
_GATE_COMPONENTS = """\
    integer :: n_clear_sky = 0                             ! clear-sky gate: no gate when 0
    integer(int32), allocatable :: clear_sky_features(:)   ! (n_clear_sky), 1-based feature indices
    real(real64) :: clear_sky_tolerance = 0.0_real64
    integer :: n_envelope = 0                              ! training envelope: none when 0
    real(real64), allocatable :: envelope_min(:), envelope_max(:), envelope_center(:), envelope_scale(:)
    real(real64), allocatable :: envelope_components(:, :) ! (n_features, n_envelope)
    real(real64), allocatable :: envelope_rows(:, :)       ! (n_envelope rounded up, n_features): by feature
    real(real64), allocatable :: envelope_variance(:)      ! (n_envelope)
    real(real64) :: envelope_residual_variance = 1.0_real64, envelope_threshold = 0.0_real64
    integer(int32), allocatable :: target_scale_feature(:)  ! (n_targets), 1-based; 0: the output is not scaled
    real(real64), allocatable :: target_scale_floor(:)       ! (n_targets)
    integer :: n_offsets = 0                                 ! prior terms added to the output: none when 0
    integer(int32), allocatable :: offset_target(:), offset_feature(:)  ! (n_offsets), 1-based
    real(real64), allocatable :: offset_coefficient(:)       ! (n_offsets)
    integer(int32), allocatable :: target_offset_outside(:)  ! (n_targets), 1: the offset alone outside the envelope
    logical :: offset_fallback = .false.                     ! some target falls back to its offset (format 1.6)"""

#: Start of the pure column procedures: zero correction where the clear-sky gate holds.
_GATE_TEST = """\
    if (clear_sky(model, features)) then
      corrections = 0.0_real64
      return
    end if"""


#: Envelope projections summed together in the envelope check (scalars p1, p2, ...: one pass over the
#: features per so many components).
_PROJECTIONS = 8


def _projection_names():
    """The envelope check's projection sums: ``p1, p2, ...``."""
    return ", ".join(f"p{i}" for i in range(1, _PROJECTIONS + 1))


def _projection_sums(prefix):
    """Statements of the envelope check summing the projections j .. j + _PROJECTIONS - 1 into ``projection``."""
    sums = range(1, _PROJECTIONS + 1)
    lines = [f"      p{i} = 0.0_real64" for i in sums] + [f"      do k = 1, {prefix}_n_features"]
    lines += [f"        p{i} = p{i} + model%envelope_rows(j{f' + {i - 1}' if i > 1 else ''}, k) * z(k)" for i in sums]
    lines += ["      end do", f"      projection(j:j + {_PROJECTIONS - 1}) = [{_projection_names()}]"]
    return "\n".join(lines)


def _batched_procedure(prefix):
    """The many-columns procedure, the envelope test and the gate test, the same for every model kind."""
    return f"""\
  !> Corrections of many columns: features(:, i) -> corrections(:, i); with outside and n_outside,
  !> also which columns lie outside the training envelope and how many (see {prefix}_check_column).
  !> A target whose transform says so (format 1.6) gets its offset alone in a column outside the envelope.
  pure subroutine {prefix}_correct_columns(model, n_columns, features, corrections, outside, n_outside)
    type({prefix}_coefficients), intent(in) :: model
    integer, intent(in) :: n_columns
    real(real64), intent(in) :: features({prefix}_n_features, n_columns)
    real(real64), intent(out) :: corrections({prefix}_n_targets, n_columns)
    logical, intent(out), optional :: outside(n_columns)
    integer, intent(out), optional :: n_outside
    logical :: flag
    real(real64) :: distance, offset_only({prefix}_n_targets)
    integer :: i
    if (present(n_outside)) n_outside = 0
    do i = 1, n_columns
      call {prefix}_correct_column(model, features(:, i), corrections(:, i))
      if (present(outside) .or. present(n_outside) .or. model%offset_fallback) then
        call {prefix}_check_column(model, features(:, i), flag, distance)
        if (present(outside)) outside(i) = flag
        if (present(n_outside) .and. flag) n_outside = n_outside + 1
        if (flag .and. model%offset_fallback) then
          ! The model's output taken as 0 and transformed: the offset terms alone, in numpy's order.
          offset_only = 0.0_real64
          call apply_transforms(model, features(:, i), offset_only)
          where (model%target_offset_outside == 1) corrections(:, i) = offset_only
        end if
      end if
    end do
  end subroutine {prefix}_correct_columns

  !> Whether one column lies outside the training envelope (a feature outside its training range, or a
  !> Mahalanobis distance from the training columns above the stored threshold; never where the clear-sky
  !> gate holds; a NaN feature is outside), and that distance. Without an envelope in the data file
  !> (n_envelope_components 0) nothing is outside and the distance is 0.
  pure subroutine {prefix}_check_column(model, features, outside, distance)
    type({prefix}_coefficients), intent(in) :: model
    real(real64), intent(in) :: features({prefix}_n_features)
    logical, intent(out) :: outside
    real(real64), intent(out) :: distance
    real(real64) :: z({prefix}_n_features), projection({prefix}_n_features + {_PROJECTIONS - 1}), residual, squares, &
        {_projection_names()}
    integer :: j, k
    outside = .false.
    distance = 0.0_real64
    if (model%n_envelope == 0) return
    z = (features - model%envelope_center) / model%envelope_scale
    ! Projections {_PROJECTIONS} at a time, each summed in feature order as a dot product: independent
    ! additions in flight instead of one (the rows past n_envelope are zeros, their projections unused).
    do j = 1, model%n_envelope, {_PROJECTIONS}
{_projection_sums(prefix)}
    end do
    do j = 1, model%n_envelope
      distance = distance + projection(j) * projection(j) / model%envelope_variance(j)
    end do
    ! The residual z minus its projections, feature by feature, the components taken off in order.
    squares = 0.0_real64
    do k = 1, {prefix}_n_features
      residual = z(k)
      do j = 1, model%n_envelope
        residual = residual - projection(j) * model%envelope_rows(j, k)
      end do
      squares = squares + residual * residual
    end do
    distance = sqrt(distance + squares / model%envelope_residual_variance)
    if (clear_sky(model, features)) return
    ! Written as "not inside" so that NaN, which compares false, is outside.
    outside = .not. (all(features >= model%envelope_min .and. features <= model%envelope_max) .and. &
                     distance <= model%envelope_threshold)
  end subroutine {prefix}_check_column

  !> The model's outputs made corrections: each scaled by its scale feature (at least the floor),
  !> then the prior terms added (coefficient times feature) -- target transforms of the coefficient file.
  pure subroutine apply_transforms(model, features, corrections)
    type({prefix}_coefficients), intent(in) :: model
    real(real64), intent(in) :: features({prefix}_n_features)
    real(real64), intent(inout) :: corrections({prefix}_n_targets)
    integer :: m, o
    real(real64) :: x
    do m = 1, {prefix}_n_targets
      if (model%target_scale_feature(m) > 0) then
        ! A missing (NaN) scale feature makes the correction NaN, as in numpy's maximum.
        x = features(model%target_scale_feature(m))
        corrections(m) = corrections(m) * merge(x, max(x, model%target_scale_floor(m)), ieee_is_nan(x))
      end if
    end do
    do o = 1, model%n_offsets
      corrections(model%offset_target(o)) = corrections(model%offset_target(o)) + &
          model%offset_coefficient(o) * features(model%offset_feature(o))
    end do
  end subroutine apply_transforms

  !> All clear-sky gate features (near) zero: a clear column far from cloud, which has no 3D correction.
  !> The loop stops at the first feature that is not zero (NaN compares false: not zero).
  pure logical function clear_sky(model, features)
    type({prefix}_coefficients), intent(in) :: model
    real(real64), intent(in) :: features({prefix}_n_features)
    integer :: g
    do g = 1, model%n_clear_sky
      if (.not. (abs(features(model%clear_sky_features(g))) <= model%clear_sky_tolerance)) exit
    end do
    clear_sky = model%n_clear_sky > 0 .and. g > model%n_clear_sky
  end function clear_sky"""


def _gate_reader(prefix):
    """Statements of the coefficient readers that read and check the clear-sky gate (after the model arrays)."""
    return f"""\
    if (status == 0) call read_integers(unit, 'clear_sky_features', model%clear_sky_features, status, message)
    if (status == 0) call read_reals(unit, 'clear_sky_tolerance', tolerance, status, message)
    if (status == 0) then
      if (any(model%clear_sky_features < 0 .or. model%clear_sky_features >= {prefix}_n_features)) then
        status = 1
        message = 'coefficient file: a clear_sky_features index is out of range'
      else if (.not. (ieee_is_finite(tolerance(1)) .and. tolerance(1) >= 0.0_real64)) then
        status = 1
        message = 'coefficient file: clear_sky_tolerance must be a finite number >= 0'
      else
        model%clear_sky_features = model%clear_sky_features + 1
        model%clear_sky_tolerance = tolerance(1)
      end if
    end if
    if (status == 0 .and. model%n_envelope > {prefix}_n_features) then
      status = 1
      message = 'coefficient file: the training envelope has more components than the model has features'
    end if
    if (status == 0 .and. model%n_envelope > 0) then
      allocate (model%envelope_min({prefix}_n_features), model%envelope_max({prefix}_n_features))
      allocate (model%envelope_center({prefix}_n_features), model%envelope_scale({prefix}_n_features))
      allocate (envelope_list({prefix}_n_features * model%n_envelope), model%envelope_variance(model%n_envelope))
      call read_reals(unit, 'envelope_feature_min', model%envelope_min, status, message)
      if (status == 0) call read_reals(unit, 'envelope_feature_max', model%envelope_max, status, message)
      if (status == 0) call read_reals(unit, 'envelope_center', model%envelope_center, status, message)
      if (status == 0) call read_reals(unit, 'envelope_scale', model%envelope_scale, status, message)
      ! The file lists the components one after the other: one column each here.
      if (status == 0) call read_reals(unit, 'envelope_components', envelope_list, status, message)
      if (status == 0) call read_reals(unit, 'envelope_component_variance', model%envelope_variance, status, message)
      if (status == 0) call read_reals(unit, 'envelope_residual_variance', tolerance, status, message)
      model%envelope_residual_variance = tolerance(1)
      if (status == 0) call read_reals(unit, 'envelope_distance_threshold', tolerance, status, message)
      model%envelope_threshold = tolerance(1)
      if (status == 0) then
        model%envelope_components = reshape(envelope_list, [{prefix}_n_features, model%n_envelope])
        allocate (model%envelope_rows({_PROJECTIONS} * ((model%n_envelope + {_PROJECTIONS - 1}) / {_PROJECTIONS}), &
                                      {prefix}_n_features))
        model%envelope_rows = 0.0_real64
        model%envelope_rows(1:model%n_envelope, :) = transpose(model%envelope_components)
        if (any(.not. (model%envelope_scale > 0.0_real64)) .or. any(.not. (model%envelope_variance > 0.0_real64)) &
            .or. .not. (model%envelope_residual_variance > 0.0_real64) .or. &
            .not. (model%envelope_threshold >= 0.0_real64) .or. any(model%envelope_max < model%envelope_min)) then
          status = 1
          message = 'coefficient file: the training envelope has a non-positive scale or variance, a negative '// &
              'threshold or a maximum below its minimum'
        end if
      end if
    end if
    if (status == 0) then
      allocate (model%target_scale_feature({prefix}_n_targets), model%target_scale_floor({prefix}_n_targets))
      allocate (model%offset_target(model%n_offsets), model%offset_feature(model%n_offsets))
      allocate (model%offset_coefficient(model%n_offsets))
      call read_integers(unit, 'target_scale_feature', model%target_scale_feature, status, message)
      if (status == 0) call read_reals(unit, 'target_scale_floor', model%target_scale_floor, status, message)
      if (status == 0) call read_integers(unit, 'offset_target', model%offset_target, status, message)
      if (status == 0) call read_integers(unit, 'offset_feature', model%offset_feature, status, message)
      if (status == 0) call read_reals(unit, 'offset_coefficient', model%offset_coefficient, status, message)
      allocate (model%target_offset_outside({prefix}_n_targets))
      model%target_offset_outside = 0
      ! Files of format 1.{OUTSIDE_ENVELOPE_VERSION[1]} on say which targets take the offset alone outside the envelope.
      if (status == 0 .and. minor >= {OUTSIDE_ENVELOPE_VERSION[1]}) then
        call read_integers(unit, 'target_offset_outside', model%target_offset_outside, status, message)
      end if
      model%offset_fallback = any(model%target_offset_outside == 1) .and. model%n_envelope > 0
      if (status == 0) then
        if (any(model%target_scale_feature < -1 .or. model%target_scale_feature >= {prefix}_n_features) .or. &
            any(.not. (model%target_scale_floor >= 0.0_real64)) .or. &
            any(model%offset_target < 0 .or. model%offset_target >= {prefix}_n_targets) .or. &
            any(model%offset_feature < 0 .or. model%offset_feature >= {prefix}_n_features) .or. &
            any(.not. (abs(model%offset_coefficient) <= huge(1.0_real64))) .or. &
            any(model%target_offset_outside < 0 .or. model%target_offset_outside > 1)) then
          status = 1
          message = 'coefficient file: a target transform has an index out of range, a negative floor, a '// &
              'coefficient that is not finite or an outside-envelope flag other than 0 or 1'
        else
          model%target_scale_feature = model%target_scale_feature + 1
          model%offset_target = model%offset_target + 1
          model%offset_feature = model%offset_feature + 1
        end if
      end if
    end if"""


def _module_header(prefix, document):
    features, targets = document["features"]["names"], document["targets"]["names"]
    kind = document["model"]["kind"]
    corrections = ("! Corrections are 3D minus independent-column longwave fields in W m-2, for the targets\n"
                   f"! in {prefix}_target_names; features are in the order and\n"
                   if document["targets"]["units"] == "W m-2" else
                   "! Corrections are 3D minus independent-column longwave net absorption of a host layer per km\n"
                   "! [W m-2 km-1], one per (column, layer) row of features; features are in the order and\n"
                   if document["targets"]["units"] == "W m-2 km-1" else
                   "! Corrections are 3D minus independent-column fluxes as fractions of the incident flux on\n"
                   f"! the horizontal, for the targets in {prefix}_target_names; features are in the order and\n")
    return f"""\
! Generated by surrogate3d export: the {kind} 3D correction "{document['model']['name']}".
{corrections}! units of {prefix}_feature_names (see the coefficient file and docs/host-model-guide.md).
module {prefix}_correction
  use, intrinsic :: iso_fortran_env, only: real64, int32
  use, intrinsic :: ieee_arithmetic, only: ieee_is_finite, ieee_is_nan{_profile_imports(document)}
  implicit none
  private

  integer, parameter, public :: {prefix}_n_features = {len(features)}
  integer, parameter, public :: {prefix}_n_targets = {len(targets)}
{_names_parameter(f"{prefix}_feature_names", f"{prefix}_n_features", features)}
{_names_parameter(f"{prefix}_target_names", f"{prefix}_n_targets", targets)}

  character(len=*), parameter :: format_name = '{FORMAT_NAME}'
  character(len=*), parameter :: format_major = '{FORMAT_VERSION.split('.')[0]}'
  integer, parameter :: line_length = 1024
"""


def _consistency_indices(document):
    """1-based positions of the five column targets in the model's targets, or None without all five."""
    names = list(document["targets"]["names"])
    if not all(t in names for t in TARGETS):
        return None
    return {t: names.index(t) + 1 for t in TARGETS}


def _consistency_declarations(prefix, document):
    if _consistency_indices(document) is None:
        return ""
    return f"""\
  public :: {prefix}_clear_sky_column, {prefix}_consistency_sums, {prefix}_balance_columns, {prefix}_make_consistent
"""


def _consistency_procedures(prefix, document):
    """The consistency step of :func:`surrogate3d.learn.apply_correction` (clip, direct + diffuse = total,
    energy balance per domain) for a model that predicts all five column targets."""
    index = _consistency_indices(document)
    if index is None:
        return ""
    total, direct, diffuse = (index[t] for t in TARGETS[:3])
    toa, absorbed = index["toa_upward_flux"], index["atmosphere_absorption"]
    clipped = ", ".join(str(index[t]) for t in TARGETS[1:])
    return f"""
  !> Whether the clear-sky gate holds for a column (its corrections are exactly 0 and stay so).
  pure logical function {prefix}_clear_sky_column(model, features)
    type({prefix}_coefficients), intent(in) :: model
    real(real64), intent(in) :: features({prefix}_n_features)
    {prefix}_clear_sky_column = clear_sky(model, features)
  end function {prefix}_clear_sky_column

  !> Consistency step, first half, on the columns of one process: negative corrected fluxes clipped to
  !> zero, the total surface correction made direct + diffuse; need and have receive the columns' shares of
  !> the energy balance of their periodic domain (add them over the processes of the domain, e.g. with an
  !> MPI all-reduce, before {prefix}_balance_columns). Fluxes and corrections are fractions of the incident
  !> flux, targets in the order of {prefix}_target_names; gated marks the columns of the clear-sky gate.
  pure subroutine {prefix}_consistency_sums(n_columns, ica, corrections, albedo, gated, need, have)
    integer, intent(in) :: n_columns
    real(real64), intent(in) :: ica({prefix}_n_targets, n_columns), albedo(n_columns)
    real(real64), intent(inout) :: corrections({prefix}_n_targets, n_columns)
    logical, intent(in) :: gated(n_columns)
    real(real64), intent(inout) :: need, have
    integer, parameter :: clipped(4) = [{clipped}]
    real(real64) :: flux({prefix}_n_targets), budget, corrected_total
    integer :: i, k
    do i = 1, n_columns
      do k = 1, 4
        if (ica(clipped(k), i) + corrections(clipped(k), i) < 0.0_real64) corrections(clipped(k), i) = -ica(clipped(k), i)
      end do
      corrected_total = ica({direct}, i) + corrections({direct}, i) + ica({diffuse}, i) + corrections({diffuse}, i)
      corrections({total}, i) = merge(0.0_real64, corrected_total - ica({total}, i), gated(i))
      if (gated(i)) cycle
      flux = ica(:, i) + corrections(:, i)
      budget = ica({toa}, i) + ica({absorbed}, i) + (1.0_real64 - albedo(i)) * ica({total}, i)
      need = need + (budget - (1.0_real64 - albedo(i)) * flux({direct}))
      have = have + (flux({toa}) + flux({absorbed}) + (1.0_real64 - albedo(i)) * flux({diffuse}))
    end do
  end subroutine {prefix}_consistency_sums

  !> Consistency step, second half: with the domain's need and have, the sinks of scattered light (TOA
  !> upward, absorption, surface diffuse) of every ungated column are scaled by one factor so that the
  !> domain's energy budget closes (the direct beam kept), and the corrected fluxes returned.
  pure subroutine {prefix}_balance_columns(n_columns, ica, corrections, gated, need, have, fluxes)
    integer, intent(in) :: n_columns
    real(real64), intent(in) :: ica({prefix}_n_targets, n_columns), corrections({prefix}_n_targets, n_columns)
    real(real64), intent(in) :: need, have
    logical, intent(in) :: gated(n_columns)
    real(real64), intent(out) :: fluxes({prefix}_n_targets, n_columns)
    real(real64) :: factor, flux({prefix}_n_targets)
    integer :: i
    factor = 1.0_real64
    if (have > 0.0_real64) factor = need / have
    if (factor < 0.0_real64) factor = 0.0_real64
    do i = 1, n_columns
      if (gated(i)) then
        fluxes(:, i) = ica(:, i)
        cycle
      end if
      flux = ica(:, i) + corrections(:, i)
      flux({toa}) = flux({toa}) * factor
      flux({absorbed}) = flux({absorbed}) * factor
      flux({diffuse}) = flux({diffuse}) * factor
      flux({total}) = flux({direct}) + flux({diffuse})
      ! As the numpy runtime: the correction (flux - ica) added to the independent column.
      fluxes(:, i) = ica(:, i) + (flux - ica(:, i))
    end do
  end subroutine {prefix}_balance_columns

  !> The consistency step on the whole periodic domain held by one process: corrected fluxes ready to use.
  pure subroutine {prefix}_make_consistent(n_columns, ica, corrections, albedo, gated, fluxes)
    integer, intent(in) :: n_columns
    real(real64), intent(in) :: ica({prefix}_n_targets, n_columns), corrections({prefix}_n_targets, n_columns)
    real(real64), intent(in) :: albedo(n_columns)
    logical, intent(in) :: gated(n_columns)
    real(real64), intent(out) :: fluxes({prefix}_n_targets, n_columns)
    real(real64) :: work({prefix}_n_targets, n_columns), need, have
    work = corrections
    need = 0.0_real64
    have = 0.0_real64
    call {prefix}_consistency_sums(n_columns, ica, work, albedo, gated, need, have)
    call {prefix}_balance_columns(n_columns, ica, work, gated, need, have, fluxes)
  end subroutine {prefix}_make_consistent
"""


#: Fortran expression of every layer feature (docs/features.md, "Layer features"), in the
#: variables of :func:`_profile_procedure`; the same operations in the same order as
#: :func:`surrogate3d.pairs.layer_features.layer_features`.
_LAYER_FEATURE_CODE = {
    "layer_height_above_cloud_top": "middle - cloud_top",
    "layer_height_above_cloud_base": "middle - cloud_base",
    "layer_cloud_fraction": "cloud_fraction(k, i)",
    "layer_log_extinction": f"log(max(1000.0_real64 * optical_depth(k, i) / thickness, {EXTINCTION_FLOOR!r}_real64))",
    "layer_log_optical_depth_above": "log(1.0_real64 + above(k))",
    "layer_direct_beam_transmittance": "vertical",
    "layer_slant_direct_beam_transmittance": "slanted",
    "layer_slant_minus_vertical_transmittance": "difference",
    "independent_column_layer_absorption_density": "1000.0_real64 * absorption(k, i) / thickness",
    "independent_column_column_absorption": "column_absorption",
}


def _profile_layer_features(document):
    """The layer features of a profile document (empty for a column model), checked against the generator's.

    A longwave profile model gets no profile procedure (empty too): its module evaluates
    (column, layer) feature rows the host builds, through ``PREFIX_correct_column``."""
    layer = list((document.get(PROFILE_FIELD) or {}).get("layer_features", []))
    if layer == list(LONGWAVE_LAYER_FEATURES):
        return []
    if layer and layer != list(_LAYER_FEATURE_CODE):
        raise ValidationError(f"profile model {document['model']['name']!r} has layer features {layer}; this "
                              f"version generates Fortran for {list(_LAYER_FEATURE_CODE)}")
    return layer


def _profile_imports(document):
    return ", ieee_value, ieee_quiet_nan" if _profile_layer_features(document) else ""


def _profile_declarations(prefix, document):
    layer = _profile_layer_features(document)
    if not layer:
        return ""
    return f"""  !> A heating-rate (profile) model: the last n_layer_features features describe one host layer.
  integer, parameter, public :: {prefix}_n_layer_features = {len(layer)}
  integer, parameter, public :: {prefix}_n_column_features = {prefix}_n_features - {prefix}_n_layer_features
  public :: {prefix}_correct_profiles, {prefix}_match_column_integral
"""


def _profile_procedure(prefix, document):
    """The profile procedure of a heating-rate model (empty for a column model)."""
    if not _profile_layer_features(document):
        return ""
    rows = "\n".join(f"        ! {name}\n        row({prefix}_n_column_features + {j + 1}) = {code}"
                      for j, (name, code) in enumerate(_LAYER_FEATURE_CODE.items()))
    return f"""
  !> Heating-rate model: the absorption correction [1] (fraction of the incident flux on the horizontal)
  !> of every layer of many host columns, layers bottom first; a layer whose bottom or top is NaN is one the
  !> column does not have (its correction is NaN). Inputs per column: its features (the column features of
  !> {prefix}_feature_names) and cos(solar zenith); per layer: its edges [m], optical depth, cloud fraction,
  !> independent-column absorption [1] and the optical depth along the path from its middle toward the sun
  !> (docs/features.md, "Layer features"). The model gives the change per km of the layer; a layer that
  !> absorbs nothing in the independent column gets none. With column_correction, the residual to it is
  !> shared among the layers in proportion to their independent-column absorption (equally where the
  !> column absorbs nothing), so the layers sum to it: energy is conserved.
  pure subroutine {prefix}_correct_profiles(model, n_columns, n_layers, column_features, cos_zenith, bottom, top, &
                                        optical_depth, cloud_fraction, absorption, slant, profile, column_correction)
    type({prefix}_coefficients), intent(in) :: model
    integer, intent(in) :: n_columns, n_layers
    real(real64), intent(in) :: column_features({prefix}_n_column_features, n_columns), cos_zenith(n_columns)
    real(real64), intent(in), dimension(n_layers, n_columns) :: bottom, top, optical_depth, cloud_fraction, &
                                                                absorption, slant
    real(real64), intent(out) :: profile(n_layers, n_columns)
    real(real64), intent(in), optional :: column_correction(n_columns)
    real(real64) :: row({prefix}_n_features), density(1), above(n_layers)
    real(real64) :: tau, acc, thickness, middle, cloud_top, cloud_base, column_absorption, vertical, slanted
    real(real64) :: difference
    integer :: i, k
    logical :: any_cloud
    do i = 1, n_columns
      any_cloud = .false.
      cloud_top = -huge(1.0_real64)
      cloud_base = huge(1.0_real64)
      column_absorption = 0.0_real64
      do k = 1, n_layers
        ! NaN compares false: a padding layer has no cloud.
        if (cloud_fraction(k, i) > 0.0_real64) then
          any_cloud = .true.
          cloud_top = max(cloud_top, top(k, i))
          cloud_base = min(cloud_base, bottom(k, i))
        end if
        column_absorption = column_absorption + zero_nan(absorption(k, i))
      end do
      if (.not. any_cloud) then
        cloud_top = 0.0_real64
        cloud_base = 0.0_real64
      end if
      ! Optical depth from the domain top down to each layer's middle.
      acc = 0.0_real64
      do k = n_layers, 1, -1
        tau = zero_nan(optical_depth(k, i))
        acc = acc + tau
        above(k) = acc - 0.5_real64 * tau
      end do
      row(1:{prefix}_n_column_features) = column_features(:, i)
      do k = 1, n_layers
        thickness = top(k, i) - bottom(k, i)
        if (.not. ieee_is_finite(thickness)) then
          profile(k, i) = ieee_value(0.0_real64, ieee_quiet_nan)
          cycle
        end if
        middle = 0.5_real64 * (bottom(k, i) + top(k, i))
        vertical = exp(-above(k) / cos_zenith(i))
        slanted = exp(-zero_nan(slant(k, i)))
        ! The same path (clear layers above the cloud): 0, not the round-off of exp.
        difference = slanted - vertical
        if (abs(difference) <= {SAME_PATH_TOLERANCE!r}_real64 * max(slanted, vertical)) difference = 0.0_real64
{rows}
        call {prefix}_correct_column(model, row, density)
        if (absorption(k, i) > 0.0_real64) then
          profile(k, i) = density(1) * thickness / 1000.0_real64
        else
          profile(k, i) = 0.0_real64
        end if
      end do
    end do
    if (present(column_correction)) then
      call {prefix}_match_column_integral(n_columns, n_layers, absorption, column_correction, profile)
    end if
  end subroutine {prefix}_correct_profiles

  !> Make every column's layer corrections sum to its column absorption correction: the residual is shared
  !> among the layers in proportion to their independent-column absorption (equally where the column
  !> absorbs nothing); NaN layers (absent) stay NaN. Energy is conserved to round-off.
  pure subroutine {prefix}_match_column_integral(n_columns, n_layers, absorption, column_correction, profile)
    integer, intent(in) :: n_columns, n_layers
    real(real64), intent(in) :: absorption(n_layers, n_columns), column_correction(n_columns)
    real(real64), intent(inout) :: profile(n_layers, n_columns)
    real(real64) :: weight_sum, profile_sum, residual, share
    integer :: i, k, n_present
    do i = 1, n_columns
      weight_sum = 0.0_real64
      profile_sum = 0.0_real64
      n_present = 0
      do k = 1, n_layers
        if (ieee_is_nan(profile(k, i))) cycle
        n_present = n_present + 1
        weight_sum = weight_sum + max(zero_nan(absorption(k, i)), 0.0_real64)
        profile_sum = profile_sum + profile(k, i)
      end do
      residual = column_correction(i) - profile_sum
      do k = 1, n_layers
        if (ieee_is_nan(profile(k, i))) cycle
        if (weight_sum > 0.0_real64) then
          share = max(zero_nan(absorption(k, i)), 0.0_real64) / weight_sum
        else
          share = 1.0_real64 / real(max(n_present, 1), real64)
        end if
        profile(k, i) = profile(k, i) + residual * share
      end do
    end do
  end subroutine {prefix}_match_column_integral

  !> x, or 0 where x is NaN.
  elemental real(real64) function zero_nan(x)
    real(real64), intent(in) :: x
    zero_nan = merge(0.0_real64, x, ieee_is_nan(x))
  end function zero_nan
"""


def _target_sums(document):
    """The ridge evaluation's scalar sums, one per target: ``sum_1, sum_2, ...``."""
    return ", ".join(f"sum_{m}" for m in range(1, len(document["targets"]["names"]) + 1))


def _ridge_sums(prefix, document):
    """Statements of the ridge sums (intercept, linear terms, then pairs, in that order per target) into
    ``corrections``."""
    targets = range(1, len(document["targets"]["names"]) + 1)
    lines = [f"    sum_{m} = model%intercept({m})" for m in targets]
    lines += [f"    do k = 1, {prefix}_n_features"]
    lines += [f"      sum_{m} = sum_{m} + model%coef({m}, k) * z(k)" for m in targets]
    lines += ["    end do", "    do p = 1, model%n_pairs", "      product = z(model%pairs(1, p)) * z(model%pairs(2, p))"]
    lines += [f"      sum_{m} = sum_{m} + model%coef({m}, {prefix}_n_features + p) * product" for m in targets]
    lines += ["    end do", f"    corrections = [{_target_sums(document)}]"]
    return "\n".join(lines)


def _ridge_module(prefix, document):
    return _module_header(prefix, document) + f"""\
  real(real64), parameter :: near_constant_fraction = {_number(NEAR_CONSTANT)}_real64

  !> Standardization, interaction pairs (1-based feature indices) and coefficients.
  type, public :: {prefix}_coefficients
    integer :: n_pairs = 0
    real(real64), allocatable :: feature_mean(:), feature_scale(:)
    integer(int32), allocatable :: pairs(:, :)          ! (2, n_pairs)
    real(real64), allocatable :: coef(:, :)             ! (n_targets, n_features + n_pairs)
    real(real64), allocatable :: intercept(:)
    integer(int32), allocatable :: near_constant(:)     ! features constant up to round-off (see the reader)
    logical :: clip_features = .false.                  ! hold features within the envelope's ranges
{_GATE_COMPONENTS}
  end type {prefix}_coefficients

  public :: {prefix}_read_coefficients, {prefix}_correct_column, {prefix}_correct_columns, {prefix}_check_column
{_consistency_declarations(prefix, document)}{_profile_declarations(prefix, document)}
contains
{_profile_procedure(prefix, document)}
  !> Corrections of one column: intercept + coef . [z, z_i z_j] with z = (x - mean) / scale,
  !> and 0 where the clear-sky gate holds.
  pure subroutine {prefix}_correct_column(model, features, corrections)
    type({prefix}_coefficients), intent(in) :: model
    real(real64), intent(in) :: features({prefix}_n_features)
    real(real64), intent(out) :: corrections({prefix}_n_targets)
    real(real64) :: z({prefix}_n_features), product, {_target_sums(document)}
    integer :: k, p
{_GATE_TEST}
    ! Within the training range (files of format 1.{RIDGE_CLIPPING_VERSION[1]} on): a fitted quadratic runs
    ! away beyond its data; the envelope check still flags the column.  A NaN stays NaN, as in numpy's clip.
    if (model%clip_features .and. model%n_envelope > 0) then
      z = (merge(features, min(max(features, model%envelope_min), model%envelope_max), ieee_is_nan(features)) &
          - model%feature_mean) / model%feature_scale
    else
      z = (features - model%feature_mean) / model%feature_scale
    end if
    ! Only values training saw for a feature that was constant in it: a file's round-off scale
    ! must not turn another value into a term of order 1e13.
    do k = 1, size(model%near_constant)
      z(model%near_constant(k)) = max(-1.0_real64, min(1.0_real64, z(model%near_constant(k))))
    end do
    ! One scalar sum per target, all advancing together: independent additions overlap in the CPU (an
    ! array of sums would be stored and loaded again at every term).
{_ridge_sums(prefix, document)}
    call apply_transforms(model, features, corrections)
  end subroutine {prefix}_correct_column

{_batched_procedure(prefix)}
{_consistency_procedures(prefix, document)}
  !> Read the data file written by surrogate3d export; status 0 on success, else message says why.
  subroutine {prefix}_read_coefficients(path, model, status, message)
    character(len=*), intent(in) :: path
    type({prefix}_coefficients), intent(out) :: model
    integer, intent(out) :: status
    character(len=*), intent(out) :: message
    real(real64), allocatable :: coef_list(:)
    integer(int32), allocatable :: pair_list(:)
    real(real64) :: tolerance(1)
    real(real64), allocatable :: envelope_list(:)
    integer :: unit, minor, p, n_terms
    status = 0
    message = ''
    n_terms = 0
    call open_coefficients(path, 'ridge', unit, minor, status, message)
    model%clip_features = minor >= {RIDGE_CLIPPING_VERSION[1]}
    call expect_count(unit, 'n_features', {prefix}_n_features, status, message)
    call expect_count(unit, 'n_targets', {prefix}_n_targets, status, message)
    call read_count(unit, 'n_clear_sky_features', model%n_clear_sky, status, message)
    call read_count(unit, 'n_envelope_components', model%n_envelope, status, message)
    call read_count(unit, 'n_offset_terms', model%n_offsets, status, message)
    call read_count(unit, 'n_pairs', model%n_pairs, status, message)
    if (status == 0) then
      allocate (model%clear_sky_features(model%n_clear_sky))
      allocate (model%feature_mean({prefix}_n_features), model%feature_scale({prefix}_n_features))
      allocate (model%near_constant(0))
      allocate (pair_list(2 * model%n_pairs), model%intercept({prefix}_n_targets))
      n_terms = {prefix}_n_features + model%n_pairs
      allocate (coef_list(n_terms * {prefix}_n_targets))
    end if
    call expect_names(unit, 'features', {prefix}_feature_names, status, message)
    call expect_names(unit, 'targets', {prefix}_target_names, status, message)
    if (status == 0) call read_reals(unit, 'feature_mean', model%feature_mean, status, message)
    if (status == 0) call read_reals(unit, 'feature_scale', model%feature_scale, status, message)
    if (status == 0) call read_integers(unit, 'interaction_pairs', pair_list, status, message)
    if (status == 0) call read_reals(unit, 'coef', coef_list, status, message)
    if (status == 0) call read_reals(unit, 'intercept', model%intercept, status, message)
    if (status == 0) then
      ! NaN or infinite coefficients would turn every correction into NaN.
      if (.not. (all(ieee_is_finite(model%feature_mean)) .and. all(ieee_is_finite(model%feature_scale)) .and. &
          all(ieee_is_finite(coef_list)) .and. all(ieee_is_finite(model%intercept)))) then
        status = 1
        message = 'coefficient file: feature_mean, feature_scale, coef and intercept must be finite numbers'
      end if
    end if
{_gate_reader(prefix)}
    if (status == 0) then
      ! The file lists the pairs (i, j) and the coefficients target by target, row by row.
      model%pairs = reshape(pair_list, [2, model%n_pairs]) + 1
      model%coef = transpose(reshape(coef_list, [n_terms, {prefix}_n_targets]))
      do p = 1, model%n_pairs
        if (model%pairs(1, p) < 1 .or. model%pairs(1, p) >= model%pairs(2, p) .or. &
            model%pairs(2, p) > {prefix}_n_features) then
          status = 1
          write (message, '(a, i0, a)') 'coefficient file: interaction pair ', p, ' is out of range'
          exit
        end if
      end do
      if (any(.not. (model%feature_scale > 0.0_real64))) then
        status = 1
        message = 'coefficient file: feature_scale must be positive'
      end if
      ! A scale at most near_constant_fraction of the mean's magnitude is the round-off spread of a
      ! feature constant in training (written before format 1.2): its standardized value is clipped.
      model%near_constant = pack([(p, p = 1, {prefix}_n_features)], &
          model%feature_scale <= near_constant_fraction * abs(model%feature_mean))
    end if
    if (unit /= -1) close (unit)
  end subroutine {prefix}_read_coefficients

{_COMMON_READERS}
end module {prefix}_correction
"""


def _boosted_module(prefix, document):
    return _module_header(prefix, document) + f"""
  !> Trees with global, 1-based node indices, each tree in preorder (the reader renumbers its nodes): the
  !> left child of internal node n is n + 1; feature 0 marks a leaf.
  type, public :: {prefix}_coefficients
    integer :: n_trees = 0, n_nodes = 0
    real(real64), allocatable :: baseline(:)            ! (n_targets)
    integer(int32), allocatable :: tree_target(:)       ! (n_trees), 1-based target
    integer(int32), allocatable :: tree_root(:)         ! (n_trees)
    integer(int32), allocatable :: feature(:), right(:)
    logical, allocatable :: missing_go_left(:)
    real(real64), allocatable :: threshold(:), value(:)
{_GATE_COMPONENTS}
  end type {prefix}_coefficients

  public :: {prefix}_read_coefficients, {prefix}_correct_column, {prefix}_correct_columns, {prefix}_check_column
{_consistency_declarations(prefix, document)}{_profile_declarations(prefix, document)}
contains
{_profile_procedure(prefix, document)}
  !> Corrections of one column: baseline plus, tree by tree, the value of the leaf reached by
  !> going left where x(feature) <= threshold (NaN: where missing_go_left) and right elsewhere;
  !> 0 where the clear-sky gate holds.
  pure subroutine {prefix}_correct_column(model, features, corrections)
    type({prefix}_coefficients), intent(in) :: model
    real(real64), intent(in) :: features({prefix}_n_features)
    real(real64), intent(out) :: corrections({prefix}_n_targets)
    integer :: t, node, m
    real(real64) :: x
    logical :: go_left
{_GATE_TEST}
    corrections = model%baseline
    if (any(ieee_is_nan(features))) then
      do t = 1, model%n_trees
        node = model%tree_root(t)
        do while (model%feature(node) > 0)
          x = features(model%feature(node))
          ! NaN compares false, so it goes left only where missing_go_left says so.
          go_left = x <= model%threshold(node) .or. (model%missing_go_left(node) .and. ieee_is_nan(x))
          node = merge(node + 1, model%right(node), go_left)
        end do
        m = model%tree_target(t)
        corrections(m) = corrections(m) + model%value(node)
      end do
    else
      ! No missing feature (the usual column): the comparison alone decides, the same walk with fewer loads.
      do t = 1, model%n_trees
        node = model%tree_root(t)
        do while (model%feature(node) > 0)
          node = merge(node + 1, model%right(node), features(model%feature(node)) <= model%threshold(node))
        end do
        m = model%tree_target(t)
        corrections(m) = corrections(m) + model%value(node)
      end do
    end if
    call apply_transforms(model, features, corrections)
  end subroutine {prefix}_correct_column

{_batched_procedure(prefix)}
{_consistency_procedures(prefix, document)}
  !> Read the data file written by surrogate3d export; status 0 on success, else message says why.
  subroutine {prefix}_read_coefficients(path, model, status, message)
    character(len=*), intent(in) :: path
    type({prefix}_coefficients), intent(out) :: model
    integer, intent(out) :: status
    character(len=*), intent(out) :: message
    integer(int32), allocatable :: offset(:), threshold_index(:), missing(:)
    real(real64), allocatable :: threshold_values(:), leaf_value(:)
    real(real64) :: tolerance(1)
    real(real64), allocatable :: envelope_list(:)
    integer(int32), allocatable :: left(:), order(:), position(:), stack(:), renumbered(:)
    integer :: unit, minor, n_leaves, n_thresholds, t, node, first, last, leaf, n_order, n_stack
    status = 0
    message = ''
    n_leaves = 0
    n_thresholds = 0
    call open_coefficients(path, 'boosted', unit, minor, status, message)
    call expect_count(unit, 'n_features', {prefix}_n_features, status, message)
    call expect_count(unit, 'n_targets', {prefix}_n_targets, status, message)
    call read_count(unit, 'n_clear_sky_features', model%n_clear_sky, status, message)
    call read_count(unit, 'n_envelope_components', model%n_envelope, status, message)
    call read_count(unit, 'n_offset_terms', model%n_offsets, status, message)
    call read_count(unit, 'n_trees', model%n_trees, status, message)
    call read_count(unit, 'n_nodes', model%n_nodes, status, message)
    call read_count(unit, 'n_leaves', n_leaves, status, message)
    call read_count(unit, 'n_thresholds', n_thresholds, status, message)
    if (status == 0) then
      allocate (model%clear_sky_features(model%n_clear_sky))
      allocate (model%baseline({prefix}_n_targets), model%tree_target(model%n_trees), offset(model%n_trees + 1))
      allocate (model%feature(model%n_nodes), threshold_index(model%n_nodes), left(model%n_nodes))
      allocate (model%right(model%n_nodes), missing(model%n_nodes), model%value(model%n_nodes))
      allocate (threshold_values(n_thresholds), leaf_value(n_leaves))
    end if
    call expect_names(unit, 'features', {prefix}_feature_names, status, message)
    call expect_names(unit, 'targets', {prefix}_target_names, status, message)
    if (status == 0) call read_reals(unit, 'baseline', model%baseline, status, message)
    if (status == 0) call read_integers(unit, 'tree_target', model%tree_target, status, message)
    if (status == 0) call read_integers(unit, 'tree_offset', offset, status, message)
    if (status == 0) call read_integers(unit, 'feature', model%feature, status, message)
    if (status == 0) call read_integers(unit, 'threshold_index', threshold_index, status, message)
    if (status == 0) call read_integers(unit, 'left', left, status, message)
    if (status == 0) call read_integers(unit, 'right', model%right, status, message)
    if (status == 0) call read_integers(unit, 'missing_go_left', missing, status, message)
    if (status == 0) call read_reals(unit, 'leaf_value', leaf_value, status, message)
    if (status == 0) call read_reals(unit, 'threshold_values', threshold_values, status, message)
    if (status == 0) then
      ! NaN or infinite leaves or baselines would turn corrections into NaN; a NaN threshold sends every value right.
      if (.not. (all(ieee_is_finite(model%baseline)) .and. all(ieee_is_finite(leaf_value)))) then
        status = 1
        message = 'coefficient file: baseline and leaf_value must be finite numbers'
      else if (any(ieee_is_nan(threshold_values))) then
        status = 1
        message = 'coefficient file: threshold_values must not be NaN'
      end if
    end if
{_gate_reader(prefix)}
    if (unit /= -1) close (unit)
    if (status /= 0) return
    if (offset(1) /= 0 .or. offset(model%n_trees + 1) /= model%n_nodes) then
      status = 1
      message = 'coefficient file: tree_offset does not span the nodes'
      return
    end if
    allocate (model%tree_root(model%n_trees), model%threshold(model%n_nodes), model%missing_go_left(model%n_nodes))
    model%threshold = 0.0_real64
    model%value = 0.0_real64
    model%missing_go_left = missing == 1
    leaf = 0
    do t = 1, model%n_trees
      first = offset(t) + 1
      last = offset(t + 1)
      model%tree_root(t) = first
      model%tree_target(t) = model%tree_target(t) + 1
      if (last < first .or. model%tree_target(t) < 1 .or. model%tree_target(t) > {prefix}_n_targets) then
        status = 1
        write (message, '(a, i0, a)') 'coefficient file: tree ', t, ' is empty or has a bad target'
        return
      end if
      do node = first, last
        if (model%feature(node) < 0) then
          ! The leaf values are listed in node order.
          leaf = leaf + 1
          if (leaf > n_leaves) exit
          model%feature(node) = 0
          model%value(node) = leaf_value(leaf)
          cycle
        end if
        ! Children come after their parent in the same tree, so every path ends at a leaf.
        left(node) = left(node) + first
        model%right(node) = model%right(node) + first
        if (model%feature(node) >= {prefix}_n_features .or. threshold_index(node) < 0 .or. &
            threshold_index(node) >= n_thresholds .or. left(node) <= node .or. &
            model%right(node) <= node .or. left(node) > last .or. model%right(node) > last) then
          status = 1
          write (message, '(a, i0, a)') 'coefficient file: node ', node, ' has an index out of range'
          return
        end if
        model%feature(node) = model%feature(node) + 1
        model%threshold(node) = threshold_values(threshold_index(node) + 1)
      end do
    end do
    if (leaf /= n_leaves) then
      status = 1
      message = 'coefficient file: n_leaves differs from the number of leaves the nodes mark'
      return
    end if
    ! Every tree in preorder, each left child right after its parent, so that a walk finds it without a
    ! load: a depth-first pass from each root, which also finds a node that two parents share or none reaches.
    allocate (order(model%n_nodes), position(model%n_nodes), stack(2 * model%n_nodes + 1), renumbered(model%n_nodes))
    position = 0
    n_order = 0
    do t = 1, model%n_trees
      n_stack = 1
      stack(1) = model%tree_root(t)
      do while (n_stack > 0)
        node = stack(n_stack)
        n_stack = n_stack - 1
        if (position(node) /= 0) then
          n_order = -1
          exit
        end if
        n_order = n_order + 1
        order(n_order) = node
        position(node) = n_order
        if (model%feature(node) > 0) then
          stack(n_stack + 1) = model%right(node)
          stack(n_stack + 2) = left(node)
          n_stack = n_stack + 2
        end if
      end do
      if (n_order /= offset(t + 1)) then
        status = 1
        write (message, '(a, i0, a)') 'coefficient file: tree ', t, ' has a node with two parents or none'
        return
      end if
    end do
    do node = 1, model%n_nodes
      renumbered(node) = 0
      if (model%feature(order(node)) > 0) renumbered(node) = position(model%right(order(node)))
    end do
    model%right = renumbered
    model%feature = model%feature(order)
    model%threshold = model%threshold(order)
    model%missing_go_left = model%missing_go_left(order)
    model%value = model%value(order)
  end subroutine {prefix}_read_coefficients

{_COMMON_READERS}
end module {prefix}_correction
"""


def _driver(prefix):
    return f"""\
! Example driver generated by surrogate3d export: reads sample features, prints corrections.
!   {prefix}_correction_driver COEFFICIENTS.txt FEATURES.txt          one line of corrections per column
!   {prefix}_correction_driver COEFFICIENTS.txt FEATURES.txt envelope per column: 1 if outside the training
!                                                                    envelope (else 0) and the distance;
!                                                                    then "n_outside N"
!   {prefix}_correction_driver COEFFICIENTS.txt FEATURES.txt REPEATS  columns per second over REPEATS passes
! FEATURES.txt: a line "n_columns n_features", then one line of features per column.
program {prefix}_correction_driver
  use, intrinsic :: iso_fortran_env, only: real64, int64, output_unit, error_unit
  use {prefix}_correction
  implicit none
  type({prefix}_coefficients) :: model
  character(len=4096) :: coefficient_path, features_path, argument
  character(len=1024) :: message
  real(real64), allocatable :: features(:, :), corrections(:, :)
  real(real64) :: seconds, checksum, distance
  logical :: envelope_mode, outside
  integer(int64) :: start, finish, rate
  integer :: status, unit, ios, n_columns, n_features, repeats, i

  if (command_argument_count() < 2) then
    write (error_unit, '(a)') 'usage: {prefix}_correction_driver COEFFICIENTS.txt FEATURES.txt [REPEATS]'
    error stop 2
  end if
  call get_command_argument(1, coefficient_path)
  call get_command_argument(2, features_path)
  repeats = 0
  envelope_mode = .false.
  if (command_argument_count() >= 3) then
    call get_command_argument(3, argument)
    envelope_mode = trim(argument) == 'envelope'
  end if
  if (command_argument_count() >= 3 .and. .not. envelope_mode) then
    read (argument, *, iostat=ios) repeats
    if (ios /= 0 .or. repeats < 1) then
      write (error_unit, '(a)') 'REPEATS must be a positive integer; got ' // trim(argument)
      error stop 2
    end if
  end if

  call {prefix}_read_coefficients(trim(coefficient_path), model, status, message)
  if (status /= 0) then
    write (error_unit, '(a)') trim(message)
    error stop 1
  end if

  open (newunit=unit, file=trim(features_path), status='old', action='read', iostat=ios)
  if (ios /= 0) then
    write (error_unit, '(a)') 'cannot open features file ' // trim(features_path)
    error stop 1
  end if
  read (unit, *, iostat=ios) n_columns, n_features
  if (ios /= 0 .or. n_features /= {prefix}_n_features .or. n_columns < 1) then
    write (error_unit, '(a, i0, a)') 'features file must start with "n_columns ', {prefix}_n_features, '"'
    error stop 1
  end if
  allocate (features(n_features, n_columns), corrections({prefix}_n_targets, n_columns))
  read (unit, *, iostat=ios) features
  close (unit)
  if (ios /= 0) then
    write (error_unit, '(a)') 'cannot read the feature values of ' // trim(features_path)
    error stop 1
  end if

  if (envelope_mode) then
    call {prefix}_correct_columns(model, n_columns, features, corrections, n_outside=repeats)
    do i = 1, n_columns
      call {prefix}_check_column(model, features(:, i), outside, distance)
      write (output_unit, '(i0, 1x, es25.17e3)') merge(1, 0, outside), distance
    end do
    write (output_unit, '(a, i0)') 'n_outside ', repeats
  else if (repeats == 0) then
    call {prefix}_correct_columns(model, n_columns, features, corrections)
    do i = 1, n_columns
      write (output_unit, '(*(es25.17e3, :, 1x))') corrections(:, i)
    end do
  else
    checksum = 0.0_real64
    call system_clock(start, rate)
    do i = 1, repeats
      call {prefix}_correct_columns(model, n_columns, features, corrections)
      checksum = checksum + corrections(1, 1 + mod(i, n_columns))
    end do
    call system_clock(finish)
    seconds = real(finish - start, real64) / real(rate, real64)
    write (output_unit, '(a, es12.5)') 'columns_per_second ', real(n_columns, real64) * repeats / max(seconds, 1e-9_real64)
    write (output_unit, '(a, es12.5)') 'checksum ', checksum
  end if
end program {prefix}_correction_driver
"""


def features_file_text(features):
    """Text of a sample-features file: ``n_columns n_features``, then one line per column."""
    features = np.asarray(features, dtype=np.float64)
    return "\n".join([f"{features.shape[0]} {features.shape[1]}"] +
                     [" ".join(_number(v) for v in row) for row in features]) + "\n"


def read_features_file(path):
    """The feature matrix of a sample-features file written by :func:`features_file_text`.

    Raises
    ------
    surrogate3d.errors.FormatError
        The file is missing, or its rows disagree with its header.
    """
    path = Path(path)
    if not path.is_file():
        raise FormatError(f"sample features file {str(path)!r} does not exist")
    header, *rows = path.read_text().splitlines()
    try:
        shape = tuple(int(n) for n in header.split())
        features = np.array([[float(v) for v in row.split()] for row in rows if row.strip()], dtype=np.float64)
    except ValueError as exc:
        raise FormatError(f"sample features file {str(path)!r} is not numbers ({exc})") from None
    if features.reshape(-1, shape[-1] if shape else 1).shape != shape:
        raise FormatError(f"sample features file {str(path)!r} announces shape {shape}; its rows give "
                          f"{features.shape}")
    return features


def corrections_file_text(corrections):
    """Text of the expected corrections: one line per column, shortest round-trip decimals."""
    return "\n".join(" ".join(_number(v) for v in row) for row in np.asarray(corrections)) + "\n"


def fortran_sources(document):
    """``{file name: text}`` of the module and the driver of a document."""
    prefix = fortran_name(document["model"]["name"])
    build = _ridge_module if document["model"]["kind"] == "ridge" else _boosted_module
    sources = {f"{prefix}_correction.f90": build(prefix, document),
               f"{prefix}_correction_driver.f90": _driver(prefix)}
    for name, text in sources.items():
        long = [i + 1 for i, line in enumerate(text.splitlines()) if len(line) > _LINE_LIMIT]
        if long:
            raise ValidationError(f"generated {name} has lines longer than {_LINE_LIMIT} characters at {long[:5]}; "
                                  "shorten the feature or target names")
    return sources


def fortran_files(document, sample_features, sample_corrections):
    """Names and texts of the Fortran module, the driver and the data files of a document.

    Parameters are those of :func:`write_fortran`.

    Returns
    -------
    dict of str -> (str, str)
        ``module``, ``driver``, ``coefficients``, ``sample_features``,
        ``sample_corrections`` -> (file name, text).
    """
    prefix = fortran_name(document["model"]["name"])
    (module, module_text), (driver, driver_text) = fortran_sources(document).items()
    return {"module": (module, module_text), "driver": (driver, driver_text),
            "coefficients": (f"{prefix}.coefficients.txt", data_file_text(document)),
            "sample_features": (f"{prefix}_sample_features.txt", features_file_text(sample_features)),
            "sample_corrections": (f"{prefix}_sample_corrections.txt", corrections_file_text(sample_corrections))}


def write_fortran(document, out_dir, sample_features, sample_corrections):
    """Write the Fortran module, the driver and the data files of a document (each atomically).

    Parameters
    ----------
    document : dict
        A checked coefficient document.
    out_dir : str or Path
        Created if missing.
    sample_features : ndarray (n_column, n_feature)
        Feature vectors to ship as ``NAME_sample_features.txt``.
    sample_corrections : ndarray (n_column, n_target)
        Their corrections from the Python runtime (``NAME_sample_corrections.txt``).

    Returns
    -------
    dict of str -> Path
        ``module``, ``driver``, ``coefficients``, ``sample_features``, ``sample_corrections``.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = {}
    for key, (name, text) in fortran_files(document, sample_features, sample_corrections).items():
        write_text_atomic(out_dir / name, text)
        paths[key] = out_dir / name
    return paths
