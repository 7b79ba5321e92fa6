! Seconds per column of one delta-Eddington band solve (delta_eddington_column), on one core.
!
! Usage: time_delta_eddington INPUT NZ NCOL MIN_SECONDS REPEATS
! INPUT as for solve_delta_eddington: tau(nz, ncol), ssa(nz, ncol), g(nz, ncol), mu0(ncol),
! albedo(ncol), unformatted stream of real64. Every column is checked once before timing.
! One sweep solves every column and stores its fluxes, as a host radiation scheme would; a timed
! run repeats the sweep until it lasts at least MIN_SECONDS, and the best of REPEATS runs is kept
! (the least disturbed by other work on the machine). Prints "key value" lines.
program time_delta_eddington
  use, intrinsic :: iso_fortran_env, only: real64, int64, error_unit
  use delta_eddington_band, only: delta_eddington_column, delta_eddington_check
  implicit none
  character(len=4096) :: input, text
  character(len=256) :: message
  integer :: nz, ncol, repeats, sweeps, j, r, unit, status
  real(real64) :: min_seconds, seconds, best, worst, checksum
  real(real64), allocatable :: tau(:, :), ssa(:, :), g(:, :), mu0(:), albedo(:)
  real(real64), allocatable :: up(:, :), direct(:, :), diffuse(:, :), absorption(:, :), summary(:, :)

  if (command_argument_count() /= 5) error stop 'usage: time_delta_eddington INPUT NZ NCOL MIN_SECONDS REPEATS'
  call get_command_argument(1, input)
  call get_command_argument(2, text)
  read (text, *) nz
  call get_command_argument(3, text)
  read (text, *) ncol
  call get_command_argument(4, text)
  read (text, *) min_seconds
  call get_command_argument(5, text)
  read (text, *) repeats
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
  end do

  checksum = 0.0_real64
  seconds = timed(1)
  sweeps = max(1, ceiling(min_seconds / max(seconds, 1.0e-9_real64)))
  best = huge(best)
  worst = 0.0_real64
  do r = 1, max(1, repeats)
    seconds = timed(sweeps) / (real(sweeps, real64) * real(ncol, real64))
    best = min(best, seconds)
    worst = max(worst, seconds)
  end do

  write (*, '(a, 1x, i0)') 'columns', ncol
  write (*, '(a, 1x, i0)') 'layers', nz
  write (*, '(a, 1x, i0)') 'sweeps', sweeps
  write (*, '(a, 1x, i0)') 'repeats', max(1, repeats)
  write (*, '(a, 1x, es24.16e3)') 'seconds_per_column', best
  write (*, '(a, 1x, es24.16e3)') 'microseconds_per_column', 1.0e6_real64 * best
  write (*, '(a, 1x, es24.16e3)') 'microseconds_per_column_worst', 1.0e6_real64 * worst
  write (*, '(a, 1x, es24.16e3)') 'columns_per_second', 1.0_real64 / best
  ! Printed so that no sweep can be optimised away.
  write (*, '(a, 1x, es24.16e3)') 'checksum', checksum + sum(summary)

contains

  ! Wall seconds of n sweeps over every column.
  function timed(n) result(elapsed)
    integer, intent(in) :: n
    real(real64) :: elapsed
    integer(int64) :: start, finish, rate
    integer :: s, i
    call system_clock(start, rate)
    do s = 1, n
      do i = 1, ncol
        call delta_eddington_column(nz, tau(:, i), ssa(:, i), g(:, i), mu0(i), albedo(i), up(:, i), direct(:, i), &
                                    diffuse(:, i), absorption(:, i), summary(1, i), summary(2, i), summary(3, i), &
                                    summary(4, i), summary(5, i))
      end do
      checksum = checksum + summary(1, 1 + mod(s - 1, ncol))
    end do
    call system_clock(finish)
    elapsed = real(finish - start, real64) / real(rate, real64)
  end function timed

end program time_delta_eddington
