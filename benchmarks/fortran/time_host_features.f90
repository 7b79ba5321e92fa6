! Times bench_host_features of a generated features module (module bench_features, written by
! benchmarks/bench_host_fortran.py --features-only) on host fields with a halo.
!
!   time_host_features FIELDS MIN_SECONDS REPEATS [SLANT_PATH_REACH]
!
! FIELDS is stream-unformatted: int32 nx, ny, nz, hx, hy; real64 dx, dy, solar_zenith_angle,
! solar_beam_azimuth; z_edge(nz + 1); the three layer fields, the five planes and the five
! independent-column fluxes, each (1-hx:nx+hx, 1-hy:ny+hy[, nz]) in Fortran order. The cap of the
! slant paths' reach [m] is passed when given. Each timed run
! repeats the call until MIN_SECONDS have passed; the best of REPEATS runs is printed as
! "key value" lines.
program time_host_features
  use, intrinsic :: iso_fortran_env, only: real64, int32, int64
  use bench_features, only: bench_host_features, bench_n_host_features
  implicit none
  character(len=1024) :: path, text
  character(len=400) :: message
  integer(int32) :: header(5)
  integer :: unit, nx, ny, nz, hx, hy, status, repeats, run, calls, best_calls
  integer(int64) :: start, finish, rate
  real(real64) :: scalars(4), min_seconds, seconds, best, worst, checksum
  real(real64), allocatable :: z_edge(:), layers(:, :, :, :), planes(:, :, :), fluxes(:, :, :), features(:, :)
  ! Not allocated (an absent optional argument) without a cap.
  real(real64), allocatable :: cap
  call get_command_argument(1, path)
  call get_command_argument(2, text)
  read (text, *) min_seconds
  call get_command_argument(3, text)
  read (text, *) repeats
  if (command_argument_count() >= 4) then
    call get_command_argument(4, text)
    allocate (cap)
    read (text, *) cap
  end if
  open (newunit=unit, file=trim(path), access='stream', form='unformatted', status='old', action='read')
  read (unit) header
  nx = header(1)
  ny = header(2)
  nz = header(3)
  hx = header(4)
  hy = header(5)
  allocate (z_edge(nz + 1), layers(1-hx:nx+hx, 1-hy:ny+hy, nz, 3), planes(1-hx:nx+hx, 1-hy:ny+hy, 5), &
            fluxes(1-hx:nx+hx, 1-hy:ny+hy, 5), features(bench_n_host_features, nx * ny))
  read (unit) scalars, z_edge, layers, planes, fluxes
  close (unit)
  call system_clock(count_rate=rate)
  best = huge(best)
  worst = 0.0_real64
  best_calls = 0
  checksum = 0.0_real64
  do run = 1, repeats
    calls = 0
    call system_clock(start)
    do
      call bench_host_features(nx, ny, nz, hx, hy, scalars(1), scalars(2), scalars(3), scalars(4), z_edge, &
          layers(:, :, :, 1), layers(:, :, :, 2), layers(:, :, :, 3), planes(:, :, 1), planes(:, :, 2), &
          planes(:, :, 3), planes(:, :, 4), planes(:, :, 5), fluxes, features, status, message, cap)
      if (status /= 0) then
        write (*, '(a)') trim(message)
        error stop 1
      end if
      checksum = checksum + features(1, 1)
      calls = calls + 1
      call system_clock(finish)
      seconds = real(finish - start, real64) / real(rate, real64)
      if (seconds >= min_seconds) exit
    end do
    if (seconds / calls < best) then
      best = seconds / calls
      best_calls = calls
    end if
    worst = max(worst, seconds / calls)
  end do
  write (*, '(a, 1x, i0)') 'columns', nx * ny
  write (*, '(a, 1x, i0)') 'features', bench_n_host_features
  write (*, '(a, 1x, i0)') 'layers', nz
  write (*, '(a, 1x, i0)') 'halo_x', hx
  write (*, '(a, 1x, i0)') 'halo_y', hy
  write (*, '(a, 1x, i0)') 'repeats', repeats
  write (*, '(a, 1x, i0)') 'calls', best_calls
  write (*, '(a, 1x, es24.16)') 'microseconds_per_column', 1.0e6_real64 * best / (nx * ny)
  write (*, '(a, 1x, es24.16)') 'microseconds_per_column_worst', 1.0e6_real64 * worst / (nx * ny)
  write (*, '(a, 1x, es24.16)') 'checksum', checksum
end program time_host_features
