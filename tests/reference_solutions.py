"""Exact plane-parallel reference solutions shared by the solver tests.

Written here from their published formulas: Chandrasekhar's H-function for semi-infinite
isotropic media and the doubling method started from exact single scattering.
"""

import numpy as np


def gauss_01(n):
    x, w = np.polynomial.legendre.leggauss(n)
    return 0.5 * (x + 1.0), 0.5 * w


def h_function(ssa, mu, n=64, iterations=300):
    """Chandrasekhar's H-function for isotropic scattering.

    Iterates H(mu) = 1 / (1 - ssa/2 mu int_0^1 H(mu') / (mu + mu') dmu') on Gauss points
    (Chandrasekhar 1960, Radiative Transfer). Convergence is fast for ssa < 1 and
    slow (error ~ 1/iterations) for ssa = 1.
    """
    nodes, weights = gauss_01(n)
    h = np.ones(n)
    for _ in range(iterations):
        h = 1.0 / (1.0 - 0.5 * ssa * nodes * (weights * h / (nodes[:, None] + nodes)).sum(axis=1))
    mu = np.atleast_1d(np.asarray(mu, dtype=float))
    return 1.0 / (1.0 - 0.5 * ssa * mu * (weights * h / (mu[:, None] + nodes)).sum(axis=1))


def hg_azimuth_mean(g, mu, mu_prime, sign, nphi=360):
    """Azimuthal mean of the Henyey-Greenstein phase function (normalized to 1 over 4 pi)
    between direction cosines mu and sign * mu_prime (Henyey and Greenstein 1941)."""
    phi = (np.arange(nphi) + 0.5) * np.pi / nphi
    sines = np.sqrt(1.0 - mu ** 2)[:, None, None] * np.sqrt(1.0 - mu_prime ** 2)[None, :, None]
    cos = sign * mu[:, None, None] * mu_prime[None, :, None] + sines * np.cos(phi)
    return ((1.0 - g * g) / (1.0 + g * g - 2.0 * g * cos) ** 1.5).mean(axis=2)


def doubling(tau, ssa, g, mu0, n=24, start=2.0 ** -30):
    """Plane albedo and total transmittance of a homogeneous layer over a black surface.

    The doubling method (van de Hulst 1980, Multiple Light Scattering; Hansen 1971,
    J. Atmos. Sci. 28, 120-125) on n Gauss points per hemisphere, started from the exact
    single-scattering reflection and transmission functions of a layer of optical depth
    <= start (van de Hulst 1980). The discretized phase function is scaled symmetrically
    so that it conserves energy on the quadrature (common practice).
    """
    mu, w = gauss_01(n)
    c = 2.0 * mu * w
    p_t, p_r = hg_azimuth_mean(g, mu, mu, 1.0), hg_azimuth_mean(g, mu, mu, -1.0)
    scale = np.ones(n)
    for _ in range(200):
        scale /= np.sqrt(scale * (0.5 * (p_t + p_r) @ (w * scale)))
    p_t, p_r = p_t * np.outer(scale, scale), p_r * np.outer(scale, scale)
    beam = np.array([mu0])
    b_t, b_r = hg_azimuth_mean(g, mu, beam, 1.0)[:, 0], hg_azimuth_mean(g, mu, beam, -1.0)[:, 0]
    norm = 0.5 * (w * (b_t + b_r)).sum()
    b_t, b_r = b_t / norm, b_r / norm

    doublings = max(0, int(np.ceil(np.log2(tau / start))))
    d = tau / 2.0 ** doublings

    def transmission(m, m0, p):
        same = np.abs(m - m0) < 1e-9
        dm = np.where(same, 1.0, m - m0)
        return np.where(same, ssa * p * d / (4.0 * m0 * m0) * np.exp(-d / m0),
                        ssa * p / (4.0 * dm) * (np.exp(-d / m) - np.exp(-d / m0)))

    col, row = mu[:, None], mu[None, :]
    refl = ssa * p_r / (4.0 * (col + row)) * -np.expm1(-d * (1.0 / col + 1.0 / row)) * c
    trans = transmission(col, row, p_t) * c + np.diag(np.exp(-d / mu))
    r0 = ssa * b_r / (4.0 * (mu + mu0)) * -np.expm1(-d * (1.0 / mu + 1.0 / mu0))
    t0 = transmission(mu, mu0, b_t)
    e0 = np.exp(-d / mu0)
    eye = np.eye(n)
    for _ in range(doublings):
        solved = np.linalg.solve(eye - refl @ refl, np.column_stack([t0 + e0 * (refl @ r0), refl @ trans]))
        down = solved[:, 0]
        r0, t0 = r0 + trans @ (e0 * r0 + refl @ down), e0 * t0 + trans @ down
        refl, trans = refl + trans @ solved[:, 1:], trans @ np.linalg.solve(eye - refl @ refl, trans)
        e0 = e0 * e0
    return float(c @ r0), float(c @ t0 + e0)
