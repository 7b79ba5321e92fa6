! Delta-Eddington fluxes of ONE band for ONE plane-parallel column over a Lambertian surface.
!
! A port of surrogate3d/solvers/two_stream.py (delta_eddington: _layers and _solve_block), kept to
! the same formulas in the same order so that it agrees with numpy to round-off; it is the reference
! cost of one band solve per column that the host-side corrections are measured against.
!
! Each layer is delta-scaled (Joseph, Wiscombe and Weinman 1976, J. Atmos. Sci. 33, 2452-2459), its
! reflectance and transmittance follow from the Eddington coefficients of the general two-stream
! equations (Meador and Weaver 1980, J. Atmos. Sci. 37, 630-643), and the layers are added over the
! surface (Lacis and Hansen 1974, J. Atmos. Sci. 31, 118-133). docs/methods/delta-eddington.md
! derives the closed forms, which stay finite for conservative scattering, zero optical depth and
! the resonance k mu0 = 1.
!
! Conventions as in Python: layer 1 is the BOTTOM layer; edge profiles are indexed 0:nz with 0 at
! the surface; fluxes are positive fractions of the incident flux on the horizontal (S0 mu0 = 1).
! "Direct" is the unscattered beam exp(-tau / mu0) of the true optical depth; light scattered into
! the truncated forward peak travels with the delta-scaled beam but is reported as diffuse.
!
! Standard Fortran 2008, no module state: safe to call from OpenMP threads.
module delta_eddington_band
  use, intrinsic :: iso_fortran_env, only: real64
  implicit none
  private

  integer, parameter :: dp = real64

  public :: delta_eddington_column, delta_eddington_check

contains

  ! (1 - exp(-x)) / x for x >= 0, equal to its limit 1 at x = 0. Fortran 2008 has no expm1, which
  ! numpy uses: below x = 1e-3 the Taylor series to x^4 (truncation < x^5 / 720 < 2e-18 relative),
  ! above it 1 - exp(-x) directly, whose rounding error is at most about 2e-16 / x < 3e-13 relative.
  elemental function one_minus_exp_over(x) result(y)
    real(dp), intent(in) :: x
    real(dp) :: y
    if (x < 1.0e-3_dp) then
      y = 1.0_dp - x * (0.5_dp - x * (1.0_dp / 6.0_dp - x * (1.0_dp / 24.0_dp - x / 120.0_dp)))
    else
      y = (1.0_dp - exp(-x)) / x
    end if
  end function one_minus_exp_over

  ! Delta-Eddington fluxes of one column for one band.
  !
  ! Inputs (all dimensionless): nz >= 1 layers; tau(nz) layer optical depth >= 0; ssa(nz)
  ! single-scattering albedo in [0, 1]; g(nz) asymmetry parameter in (-1, 1); mu0 cosine of the
  ! solar zenith angle in (0, 1]; albedo Lambertian surface albedo in [0, 1]. Like
  ! two_stream._solve_block, the solve does not check them: delta_eddington_check does.
  !
  ! Outputs, fractions of S0 mu0: upward(0:nz), downward_direct(0:nz) (unscattered),
  ! downward_diffuse(0:nz) edge fluxes; layer_absorption(nz); toa_upward, surface_direct,
  ! surface_diffuse, surface_upward and atmosphere_absorption (the sum of layer_absorption).
  pure subroutine delta_eddington_column(nz, tau, ssa, g, mu0, albedo, upward, downward_direct, &
                                         downward_diffuse, layer_absorption, toa_upward, surface_direct, &
                                         surface_diffuse, surface_upward, atmosphere_absorption)
    integer, intent(in) :: nz
    real(dp), intent(in) :: tau(nz), ssa(nz), g(nz), mu0, albedo
    real(dp), intent(out) :: upward(0:nz), downward_direct(0:nz), downward_diffuse(0:nz)
    real(dp), intent(out) :: layer_absorption(nz)
    real(dp), intent(out) :: toa_upward, surface_direct, surface_diffuse, surface_upward, &
                             atmosphere_absorption
    real(dp) :: r_dif(nz), t_dif(nz), r_dir(nz), t_dd(nz), t_dir(nz), tau_s(nz), multiple(nz)
    real(dp) :: below_dif(0:nz), below_dir(0:nz), beam_s(0:nz), down(0:nz), net(0:nz)
    real(dp) :: gpos, f, one_minus_ssa_f, ssa_s, co_albedo_s, g_s
    real(dp) :: gamma1, gamma2_eddington, gamma2, gamma3, gamma4, k, alpha1, alpha2
    real(dp) :: e, e0, e2, sigma, delta, inv_delta, detune, q, c, b3, a2k, mi, depth, depth_s
    integer :: i

    do i = 1, nz
      ! Joseph et al. (1976): forward-peak fraction f = g^2. A backscattering phase function
      ! (g < 0) has no forward peak to truncate, so it is left unscaled.
      gpos = max(g(i), 0.0_dp)
      f = gpos * gpos
      one_minus_ssa_f = 1.0_dp - ssa(i) * f
      tau_s(i) = one_minus_ssa_f * tau(i)
      ssa_s = ssa(i) * (1.0_dp - f) / one_minus_ssa_f
      ! 1 - ssa_s from 1 - ssa directly, so that k is exactly 0 for conservative scattering.
      co_albedo_s = (1.0_dp - ssa(i)) / one_minus_ssa_f
      g_s = g(i) / (1.0_dp + gpos)

      ! Eddington coefficients (Meador and Weaver 1980, Table 1), with the guards of the Python
      ! solver: gamma2 < 0 would make a strongly absorbing layer reflect negatively, gamma3
      ! outside [0, 1] (g mu0 < -2/3) would give negative source terms.
      gamma1 = 0.25_dp * (7.0_dp - ssa_s * (4.0_dp + 3.0_dp * g_s))
      gamma2_eddington = -0.25_dp * (1.0_dp - ssa_s * (4.0_dp - 3.0_dp * g_s))
      gamma2 = max(gamma2_eddington, 0.0_dp)
      gamma3 = min(max(0.25_dp * (2.0_dp - 3.0_dp * g_s * mu0), 0.0_dp), 1.0_dp)
      gamma4 = 1.0_dp - gamma3
      ! k^2 = gamma1^2 - gamma2^2 = 3 (1 - ssa_s)(1 - ssa_s g_s) for the Eddington coefficients.
      if (gamma2_eddington > 0.0_dp) then
        k = sqrt(3.0_dp * co_albedo_s * (1.0_dp - ssa_s * g_s))
      else
        k = gamma1
      end if
      alpha1 = gamma1 * gamma4 + gamma2 * gamma3
      alpha2 = gamma1 * gamma3 + gamma2 * gamma4

      e = exp(-k * tau_s(i))
      e0 = exp(-tau_s(i) / mu0)
      t_dir(i) = e0
      e2 = e * e
      sigma = tau_s(i) * one_minus_exp_over(2.0_dp * k * tau_s(i))        ! (1 - e^2) / (2k)
      delta = 0.5_dp * (1.0_dp + e2) + gamma1 * sigma
      inv_delta = 1.0_dp / delta
      ! (e - e0) / (1 - k mu0) as a divided difference: finite at the resonance k mu0 = 1.
      detune = abs(1.0_dp / mu0 - k) * tau_s(i)
      q = max(e, e0) * tau_s(i) * one_minus_exp_over(detune) / mu0

      r_dif(i) = gamma2 * sigma * inv_delta
      t_dif(i) = e * inv_delta
      c = ssa_s / (1.0_dp + k * mu0) * inv_delta
      b3 = gamma3 - alpha2 * mu0
      a2k = alpha2 + k * gamma3
      r_dir(i) = c * (a2k * sigma + b3 * e * q)
      t_dd(i) = c * (q * ((gamma4 + alpha1 * mu0) * delta + b3 * gamma2 * sigma) &
                     - gamma2 * e * sigma * a2k / (gamma1 + k))
    end do

    ! Upward sweep: reflectance of everything below each edge, for diffuse light and for the
    ! (delta-scaled) direct beam; the Lambertian surface treats both alike.
    below_dif(0) = albedo
    below_dir(0) = albedo
    do i = 1, nz
      mi = 1.0_dp / (1.0_dp - r_dif(i) * below_dif(i - 1))
      multiple(i) = mi
      below_dif(i) = r_dif(i) + t_dif(i) * t_dif(i) * below_dif(i - 1) * mi
      below_dir(i) = r_dir(i) + t_dif(i) * mi * (t_dir(i) * below_dir(i - 1) &
                                                 + t_dd(i) * below_dif(i - 1))
    end do

    ! Direct beam at the edges, delta-scaled (solver) and unscattered (reported), with the
    ! optical depth above each edge summed from the top down as numpy's cumsum does.
    beam_s(nz) = 1.0_dp
    downward_direct(nz) = 1.0_dp
    depth_s = 0.0_dp
    depth = 0.0_dp
    do i = nz - 1, 0, -1
      depth_s = depth_s + tau_s(i + 1)
      depth = depth + tau(i + 1)
      beam_s(i) = exp(-depth_s / mu0)
      downward_direct(i) = exp(-depth / mu0)
    end do

    ! Downward sweep: diffuse downward flux at each edge, multiple reflections included.
    down(nz) = 0.0_dp
    do i = nz - 1, 0, -1
      down(i) = (beam_s(i + 1) * t_dd(i + 1) + down(i + 1) * t_dif(i + 1) &
                 + r_dif(i + 1) * beam_s(i) * below_dir(i)) * multiple(i + 1)
    end do
    do i = 0, nz
      upward(i) = beam_s(i) * below_dir(i) + down(i) * below_dif(i)
      net(i) = beam_s(i) + down(i) - upward(i)
      downward_diffuse(i) = beam_s(i) - downward_direct(i) + down(i)
    end do
    atmosphere_absorption = 0.0_dp
    do i = 1, nz
      layer_absorption(i) = net(i) - net(i - 1)
      atmosphere_absorption = atmosphere_absorption + layer_absorption(i)
    end do
    toa_upward = upward(nz)
    surface_direct = downward_direct(0)
    surface_diffuse = downward_diffuse(0)
    surface_upward = upward(0)
  end subroutine delta_eddington_column

  ! The ranges delta_eddington_column assumes, checked as the Python solver checks them. status is
  ! 0 if all hold; otherwise 1 and message names the first offending variable, index and value.
  pure subroutine delta_eddington_check(nz, tau, ssa, g, mu0, albedo, status, message)
    integer, intent(in) :: nz
    real(dp), intent(in) :: tau(:), ssa(:), g(:), mu0, albedo
    integer, intent(out) :: status
    character(len=*), intent(out) :: message
    integer :: i

    status = 1
    message = ''
    if (nz < 1) then
      write (message, '(a, i0)') 'nz must be >= 1; got ', nz
      return
    end if
    if (size(tau) /= nz .or. size(ssa) /= nz .or. size(g) /= nz) then
      write (message, '(a, i0, a, 3(1x, i0))') 'tau, ssa and g must have nz = ', nz, &
        ' layers; got', size(tau), size(ssa), size(g)
      return
    end if
    ! The negated comparisons also reject NaN.
    do i = 1, nz
      if (.not. (tau(i) >= 0.0_dp .and. tau(i) <= huge(tau(i)))) then
        write (message, '(a, i0, a, es24.16e3)') 'tau(', i, ') must be finite and >= 0; got ', tau(i)
        return
      end if
      if (.not. (ssa(i) >= 0.0_dp .and. ssa(i) <= 1.0_dp)) then
        write (message, '(a, i0, a, es24.16e3)') 'ssa(', i, ') must be in [0, 1]; got ', ssa(i)
        return
      end if
      if (.not. (g(i) > -1.0_dp .and. g(i) < 1.0_dp)) then
        write (message, '(a, i0, a, es24.16e3)') 'g(', i, ') must be in (-1, 1); got ', g(i)
        return
      end if
    end do
    if (.not. (mu0 > 0.0_dp .and. mu0 <= 1.0_dp)) then
      write (message, '(a, es24.16e3)') 'mu0 must be in (0, 1]; got ', mu0
      return
    end if
    if (.not. (albedo >= 0.0_dp .and. albedo <= 1.0_dp)) then
      write (message, '(a, es24.16e3)') 'albedo must be in [0, 1]; got ', albedo
      return
    end if
    status = 0
  end subroutine delta_eddington_check

end module delta_eddington_band
