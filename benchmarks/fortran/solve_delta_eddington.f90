! Solves columns read from a binary file with delta_eddington_column and writes every output, for the
! comparison with numpy in tests/solvers/test_delta_eddington_fortran.py.
!
! Usage: solve_delta_eddington INPUT OUTPUT NZ NCOL
! INPUT (unformatted stream of real64, Fortran order): tau(nz, ncol), ssa(nz, ncol), g(nz, ncol),
! mu0(ncol), albedo(ncol) -- what numpy's tofile writes for C-ordered (ncol, nz) and (ncol,) arrays.
! OUTPUT (same form): upward(0:nz, ncol), downward_direct(0:nz, ncol), downward_diffuse(0:nz, ncol),
! layer_absorption(nz, ncol), then per column toa_upward, surface_direct, surface_diffuse,
! surface_upward, atmosphere_absorption as summary(5, ncol).
program solve_delta_eddington
  use, intrinsic :: iso_fortran_env, only: real64, error_unit
  use delta_eddington_band, only: delta_eddington_column, delta_eddington_check
  implicit none
  character(len=4096) :: input, output, text
  character(len=256) :: message
  integer :: nz, ncol, j, unit, status
  real(real64), allocatable :: tau(:, :), ssa(:, :), g(:, :), mu0(:), albedo(:)
  real(real64), allocatable :: up(:, :), direct(:, :), diffuse(:, :), absorption(:, :), summary(:, :)

  if (command_argument_count() /= 4) error stop 'usage: solve_delta_eddington INPUT OUTPUT NZ NCOL'
  call get_command_argument(1, input)
  call get_command_argument(2, output)
  call get_command_argument(3, text)
  read (text, *) nz
  call get_command_argument(4, text)
  read (text, *) ncol
  allocate (tau(nz, ncol), ssa(nz, ncol), g(nz, ncol), mu0(ncol), albedo(ncol))
  allocate (up(0:nz, ncol), direct(0:nz, ncol), diffuse(0:nz, ncol), absorption(nz, ncol), summary(5, ncol))
  open (newunit=unit, file=trim(input), access='stream', form='unformatted', status='old', action='read')
  read (unit) tau, ssa, g, mu0, albedo
  close (unit)
  do j = 1, ncol
    call delta_eddington_check(nz, tau(:, j), ssa(:, j), g(:, j), mu0(j), albedo(j), status, message)
    if (status /= 0) then
      write (error_unit, '(a, i0, a, a)') 'column ', j, ': ', trim(message)
      error stop 2
    end if
    call delta_eddington_column(nz, tau(:, j), ssa(:, j), g(:, j), mu0(j), albedo(j), up(:, j), direct(:, j), &
                                diffuse(:, j), absorption(:, j), summary(1, j), summary(2, j), summary(3, j), &
                                summary(4, j), summary(5, j))
  end do
  open (newunit=unit, file=trim(output), access='stream', form='unformatted', status='replace', action='write')
  write (unit) up, direct, diffuse, absorption, summary
  close (unit)
end program solve_delta_eddington
