"""Exact plane-parallel reference solutions shared by the solver tests.

Written here from their published formulas: Chandrasekhar's H-function for semi-infinite
isotropic media, the doubling method started from exact single scattering, and the adding
method for layered atmospheres over a Lambertian surface.
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


def homogeneous_layer(tau, ssa, g, mu0, mu, w, start=2.0 ** -30):
    """Reflection and transmission of a homogeneous layer by the doubling method.

    The doubling method (van de Hulst 1980, Multiple Light Scattering; Hansen 1971,
    J. Atmos. Sci. 28, 120-125) on the Gauss points ``mu`` with weights ``w`` of one
    hemisphere, started from the exact single-scattering reflection and transmission
    functions of a layer of optical depth <= start (van de Hulst 1980). The discretized
    phase function is scaled symmetrically so that it conserves energy on the quadrature
    (common practice).

    Radiances are in units of the incident flux on the horizontal over pi, so that a
    radiance vector ``I`` carries the flux ``c @ I`` with ``c = 2 mu w``.

    Returns
    -------
    refl, trans : ndarray (n, n)
        Diffuse reflection and transmission matrices, the quadrature weights ``c`` of the
        incoming directions included; the same from above and from below, since the layer
        is homogeneous.
    r0, t0 : ndarray (n,)
        Diffusely reflected and transmitted radiance of a beam of unit flux at cosine mu0.
    e0 : float
        Direct transmission ``exp(-tau / mu0)``.
    """
    n = mu.size
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
    return refl, trans, r0, t0, e0


def doubling(tau, ssa, g, mu0, n=24, start=2.0 ** -30):
    """Plane albedo and total transmittance of a homogeneous layer over a black surface
    (:func:`homogeneous_layer` on n Gauss points per hemisphere)."""
    mu, w = gauss_01(n)
    c = 2.0 * mu * w
    _, _, r0, t0, e0 = homogeneous_layer(tau, ssa, g, mu0, mu, w, start)
    return float(c @ r0), float(c @ t0 + e0)


def adding(tau, ssa, g, mu0, albedo, n=24, start=2.0 ** -30):
    """Absorption of every layer of a plane-parallel atmosphere over a Lambertian surface.

    The adding method with the diffuse radiances at every interface (Hansen and Travis
    1974, Space Sci. Rev. 16, 527-610; van de Hulst 1980): every homogeneous
    layer's reflection and transmission come from :func:`homogeneous_layer`; a sweep up
    from the surface gives the reflection of everything below each interface, a sweep down
    from the top the downward radiance at each interface, for direct-beam incidence at
    cosine mu0. Fluxes need only the azimuthal mean of the radiance. A layer absorbs the
    net flux entering at its top minus the net flux leaving at its bottom.

    Parameters
    ----------
    tau, ssa, g : sequence (nz,)
        Optical depth (> 0), single-scattering albedo and Henyey-Greenstein asymmetry of
        every layer, index 0 the bottom layer (a scene's z axis).
    mu0 : float
        Cosine of the solar zenith angle.
    albedo : float
        Lambertian surface albedo.

    Returns
    -------
    layer_absorption : ndarray (nz,)
        Absorbed fraction of the incident flux on the horizontal, index 0 the bottom layer.
    toa_albedo, surface_absorption : float
    """
    mu, w = gauss_01(n)
    c = 2.0 * mu * w
    # Listed from the top down from here: the beam enters layer 0.
    layers = [homogeneous_layer(t, s, a, mu0, mu, w, start) for t, s, a in zip(tau[::-1], ssa[::-1], g[::-1])]
    nz = len(layers)
    eye = np.eye(n)
    # A Lambertian surface reflects radiance albedo times the arriving flux (over pi) in
    # every direction, for diffuse light and for the direct beam alike.
    below = [None] * nz + [(albedo * np.outer(np.ones(n), c), albedo * np.ones(n))]
    for k in range(nz - 1, -1, -1):
        refl, trans, r0, t0, e0 = layers[k]
        s_mat, s_beam = below[k + 1]
        # The light bouncing between the layer and what lies below sums to (1 - R S)^-1.
        inner = np.linalg.inv(eye - refl @ s_mat)
        down = inner @ (t0 + e0 * refl @ s_beam)
        below[k] = (refl + trans @ s_mat @ inner @ trans, r0 + trans @ (s_mat @ down + e0 * s_beam))
    direct, diffuse_down, net = 1.0, np.zeros(n), np.zeros(nz + 1)
    for k in range(nz + 1):
        s_mat, s_beam = below[k]
        up = s_mat @ diffuse_down + direct * s_beam
        net[k] = direct + c @ diffuse_down - c @ up
        if k == nz:
            break
        refl, trans, _, t0, e0 = layers[k]
        s_next, s_beam_next = below[k + 1]
        diffuse_down = np.linalg.solve(eye - refl @ s_next,
                                       trans @ diffuse_down + direct * t0 + direct * e0 * refl @ s_beam_next)
        direct *= e0
    toa_albedo = float(c @ below[0][1])
    return -np.diff(net)[::-1], toa_albedo, float(net[-1])
