"""Scattering by homogeneous spheres: Mie theory, vectorised over size parameters.

The efficiencies follow from the Mie coefficients ``a_n``, ``b_n`` (Mie 1908) computed as in
the algorithm of Bohren and Huffman (1983, Appendix A): the logarithmic derivative
``D_n(m x)`` by downward recurrence, the Riccati-Bessel functions ``psi_n(x)`` and
``chi_n(x)`` by upward recurrence, and the series stopped after
``x + 4 x^(1/3) + 2`` terms (Wiscombe 1980).
"""

import numpy as np

from ..core.validation import check_array, check_number


def mie_efficiencies(size_parameter, refractive_index):
    """Extinction and scattering efficiencies and asymmetry parameter of spheres.

    Parameters
    ----------
    size_parameter : array_like
        ``x = 2 pi r / lambda`` [1], > 0 (radius r, wavelength lambda in the medium).
    refractive_index : complex
        Refractive index of the sphere relative to the medium, ``n + i k`` with n > 0 and
        k >= 0 (absorption positive).

    Returns
    -------
    extinction_efficiency, scattering_efficiency, asymmetry_parameter : numpy.ndarray
        ``Q_ext``, ``Q_sca`` [1] (cross-section over ``pi r^2``) and ``g`` [1], shaped like
        ``size_parameter``.

    References
    ----------
    Mie, G., 1908: Beitraege zur Optik trueber Medien, speziell kolloidaler Metalloesungen.
    Ann. Phys., 330, 377-445.

    Bohren, C. F. and D. R. Huffman, 1983: Absorption and Scattering of Light by Small
    Particles. Wiley, eqs. 4.61, 4.62, 4.88 and Appendix A.

    Wiscombe, W. J., 1980: Improved Mie scattering algorithms. Appl. Opt., 19, 1505-1509.

    Examples
    --------
    A non-absorbing sphere much larger than the wavelength removes twice its geometric
    cross-section (the extinction paradox) and scatters all it removes:

    >>> q_ext, q_sca, g = mie_efficiencies(2000.0, 1.33)
    >>> round(float(q_ext), 1), bool(np.isclose(q_sca, q_ext))
    (2.0, True)
    """
    x = np.asarray(size_parameter, dtype=np.float64)
    check_array("size_parameter", x, 0.0, None, low_open=True)
    m = complex(refractive_index)
    check_number("refractive_index.real", m.real, 0.0, None, low_open=True)
    check_number("refractive_index.imag", m.imag, 0.0, None)
    shape = x.shape
    x = x.ravel()
    nstop = np.floor(x + 4.0 * np.cbrt(x) + 2.0).astype(int)
    nmax = int(nstop.max())
    mx = m * x
    # Downward recurrence for D_n(mx), started well above the last term needed: it is
    # stable for every m (Bohren and Huffman 1983, section 4.8).
    start = int(max(nmax, np.abs(mx).max())) + 16
    d = np.zeros((nmax + 1, x.size), dtype=np.complex128)
    current = np.zeros(x.size, dtype=np.complex128)
    for n in range(start, 0, -1):
        current = n / mx - 1.0 / (current + n / mx)
        if n - 1 <= nmax:
            d[n - 1] = current
    psi0, psi1 = np.cos(x), np.sin(x)
    chi0, chi1 = -np.sin(x), np.cos(x)
    xi1 = psi1 - 1j * chi1
    ext_sum = np.zeros(x.size)
    sca_sum = np.zeros(x.size)
    g_sum = np.zeros(x.size)
    a_prev = np.zeros(x.size, dtype=np.complex128)
    b_prev = np.zeros(x.size, dtype=np.complex128)
    # Past its own stopping term an element's chi_n overflows: its terms are masked to 0.
    with np.errstate(over="ignore", invalid="ignore"):
        for n in range(1, nmax + 1):
            active = n <= nstop
            psi = (2 * n - 1) * psi1 / x - psi0
            chi = (2 * n - 1) * chi1 / x - chi0
            xi = psi - 1j * chi
            dn = d[n]
            a = ((dn / m + n / x) * psi - psi1) / ((dn / m + n / x) * xi - xi1)
            b = ((m * dn + n / x) * psi - psi1) / ((m * dn + n / x) * xi - xi1)
            a = np.where(active, a, 0.0)
            b = np.where(active, b, 0.0)
            ext_sum += (2 * n + 1) * (a.real + b.real)
            sca_sum += (2 * n + 1) * (a.real ** 2 + a.imag ** 2 + b.real ** 2 + b.imag ** 2)
            g_sum += (2 * n + 1) / (n * (n + 1)) * (a * b.conjugate()).real
            if n > 1:
                g_sum += (n - 1) * (n + 1) / n * (a_prev * a.conjugate() + b_prev * b.conjugate()).real
            a_prev, b_prev = a, b
            psi0, psi1 = psi1, psi
            chi0, chi1 = chi1, chi
            xi1 = psi1 - 1j * chi1
    q_ext = 2.0 / x ** 2 * ext_sum
    q_sca = 2.0 / x ** 2 * sca_sum
    g = 2.0 * g_sum / sca_sum
    return q_ext.reshape(shape), q_sca.reshape(shape), g.reshape(shape)
