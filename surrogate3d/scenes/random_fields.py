"""Fourier-filtered Gaussian random fields on the periodic horizontal grid.

Cloud liquid water and cloud-top height fluctuate with a power-law wavenumber spectrum,
``E(k) ~ k**(-5/3)`` over scales from tens of metres to tens of kilometres (Cahalan
and Snider 1989; Davis et al. 1996).  A field with that spectrum is made by filtering
white noise in Fourier space; periodic boundaries come for free.  Thresholding such a
field at a quantile gives a cloud mask with an exact cloud fraction.
"""

import numpy as np

from ..core.validation import check_number
from ..errors import ParameterError

#: Exponent of the wavenumber spectrum of cloud fields, E(k) ~ k**(-5/3).
CLOUD_SPECTRAL_EXPONENT = 5.0 / 3.0


def random_generator(seed, *keys):
    """A numpy Generator for one named random stream of a seeded computation.

    Each stream (one per key tuple) is independent of the others, so adding a field to
    a scene does not change the fields that were already there.

    Parameters
    ----------
    seed : int
        Non-negative seed of the whole computation.
    *keys : int
        Non-negative integers naming the stream.

    Returns
    -------
    numpy.random.Generator
    """
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(int(seed), spawn_key=tuple(keys))))


def _wavenumbers(ny, nx, dx, dy):
    """Magnitude of the horizontal wavenumber [cycles m-1] on the ``rfft2`` grid."""
    ky = np.fft.fftfreq(ny, d=dy)[:, np.newaxis]
    kx = np.fft.rfftfreq(nx, d=dx)[np.newaxis, :]
    return np.sqrt(kx * kx + ky * ky)


def gaussian_random_field(shape, dx, dy, rng, spectral_exponent=CLOUD_SPECTRAL_EXPONENT, outer_scale=None):
    """A periodic, zero-mean, unit-variance Gaussian field with a power-law spectrum.

    The radially integrated spectrum is ``E(k) ~ k**(-spectral_exponent)``, so the 2D
    spectral density is ``k**(-spectral_exponent - 1)``; with an outer scale ``L`` the
    density becomes ``(k**2 + L**-2)**(-(spectral_exponent + 1) / 2)``, flat at scales
    larger than ``L``.

    Parameters
    ----------
    shape : tuple of int
        ``(ny, nx)``.
    dx, dy : float
        Cell size [m].
    rng : numpy.random.Generator
        Source of the white noise.
    spectral_exponent : float
        Exponent of ``E(k)`` [1], in [0, 5]; 5/3 for clouds (Davis et al. 1996).
    outer_scale : float, optional
        Length [m] above which fluctuations stop growing; ``None`` for a pure power law
        up to the domain size.

    Returns
    -------
    numpy.ndarray, shape (ny, nx)
        Field with sample mean 0 and sample standard deviation 1 (a constant zero field
        for a single cell).

    References
    ----------
    Cahalan, R. F. and J. B. Snider (1989), Marine stratocumulus structure, Remote Sens.
    Environ. 28, 95-107.
    Davis, A., A. Marshak, W. Wiscombe and R. Cahalan (1996), Scale invariance of
    liquid water distributions in marine stratocumulus. Part I: Spectral properties and
    stationarity issues, J. Atmos. Sci. 53, 1538-1558.

    Examples
    --------
    >>> rng = random_generator(1)
    >>> f = gaussian_random_field((32, 32), 100.0, 100.0, rng)
    >>> round(float(f.std()), 6), f.shape
    (1.0, (32, 32))
    """
    ny, nx = (int(n) for n in shape)
    if ny < 1 or nx < 1:
        raise ParameterError(f"shape must be two positive sizes; got {shape!r}")
    check_number("spectral_exponent", spectral_exponent, 0.0, 5.0)
    if outer_scale is not None:
        check_number("outer_scale", outer_scale, 0.0, None, low_open=True)
    noise = rng.standard_normal((ny, nx))
    if ny * nx == 1:
        return np.zeros((ny, nx))
    k = _wavenumbers(ny, nx, float(dx), float(dy))
    k0 = 0.0 if outer_scale is None else 1.0 / float(outer_scale)
    with np.errstate(divide="ignore"):
        amplitude = (k * k + k0 * k0) ** (-(spectral_exponent + 1.0) / 4.0)
    amplitude[0, 0] = 0.0
    field = np.fft.irfft2(np.fft.rfft2(noise) * amplitude, s=(ny, nx))
    field -= field.mean()
    std = field.std()
    return field / std if std > 0 else field


def radial_spectrum(field, dx, dy):
    """Radially integrated power spectrum of a periodic 2D field.

    The power of all Fourier modes whose wavenumber magnitude falls in each ring of
    width ``1 / (n dx)`` is summed, giving ``E(k)`` such that ``sum(E) = variance``.

    Parameters
    ----------
    field : array_like, shape (ny, nx)
        Field on a periodic grid, square cells (``dx == dy``) expected for clean rings.
    dx, dy : float
        Cell size [m].

    Returns
    -------
    wavenumber : numpy.ndarray
        Ring centre wavenumbers [cycles m-1], excluding k = 0.
    power : numpy.ndarray
        Power in each ring [field units squared].
    """
    f = np.asarray(field, dtype=np.float64)
    ny, nx = f.shape
    power2d = np.abs(np.fft.fft2(f - f.mean())) ** 2 / (nx * ny) ** 2
    k = np.sqrt(np.fft.fftfreq(ny, d=dy)[:, None] ** 2 + np.fft.fftfreq(nx, d=dx)[None, :] ** 2)
    dk = 1.0 / (max(nx, ny) * max(dx, dy))
    ring = np.rint(k / dk).astype(int)
    power = np.bincount(ring.ravel(), weights=power2d.ravel())
    wavenumber = np.arange(power.size) * dk
    return wavenumber[1:], power[1:]


def quantile_mask(field, fraction):
    """Mask of the ``round(fraction * size)`` largest values of a field.

    Parameters
    ----------
    field : array_like
        Any real field.
    fraction : float
        Fraction of cells to select [1], in [0, 1].

    Returns
    -------
    mask : numpy.ndarray of bool
        Exactly ``round(fraction * field.size)`` cells are True.
    threshold : float
        A value between the smallest selected and the largest unselected value
        (``-inf`` when every cell is selected, ``+inf`` when none is).

    Examples
    --------
    >>> mask, t = quantile_mask(np.arange(10.0), 0.3)
    >>> mask.nonzero()[0].tolist(), t
    ([7, 8, 9], 6.5)
    """
    check_number("fraction", fraction, 0.0, 1.0)
    f = np.asarray(field, dtype=np.float64)
    flat = f.ravel()
    n = int(round(float(fraction) * flat.size))
    mask = np.zeros(flat.size, dtype=bool)
    if n == 0:
        return mask.reshape(f.shape), np.inf
    if n == flat.size:
        return np.ones(f.shape, dtype=bool), -np.inf
    order = np.argpartition(-flat, n - 1)
    mask[order[:n]] = True
    threshold = 0.5 * (flat[mask].min() + flat[~mask].max())
    return mask.reshape(f.shape), float(threshold)


def _block_weights(n, blocks):
    """Split factors of the cascade along one axis of ``n`` cells at a level of ``blocks`` blocks.

    Block ``i`` spans cells ``[i n // blocks, (i + 1) n // blocks)`` and splits into two
    children at ``(2 i + 1) n // (2 blocks)``.  Returns, per cell, the block index, whether
    the cell lies in the left child, and the factors ``2 L_right / L`` (for the left child)
    or ``2 L_left / L`` (for the right child) that keep the block's sum when the left child
    is multiplied by ``1 + s f 2 L_right / L`` and the right by ``1 - s f 2 L_left / L``.
    """
    cells = np.arange(n)
    edges = (np.arange(2 * blocks + 1) * n) // (2 * blocks)
    child = np.searchsorted(edges, cells, side="right") - 1
    block = child // 2
    left = child % 2 == 0
    length = (edges[2 * block + 2] - edges[2 * block]).astype(np.float64)
    other = np.where(left, edges[2 * block + 2] - edges[2 * block + 1], edges[2 * block + 1] - edges[2 * block])
    return block, left, 2.0 * other / length


def bounded_cascade(shape, rng, variability=0.5, hurst=1.0 / 3.0):
    """A 2D bounded multiplicative cascade: a positive field of mean 1, intermittent at small scales.

    Starting from a uniform field, every block is split in x into two halves that are
    multiplied by ``1 + s f_n`` and ``1 - s f_n`` (``s = +-1`` at random), then each half is
    split in y the same way with its own sign, level ``n = 0, 1, ...`` until the blocks are
    single cells, with ``f_n = variability * 2**(-n * hurst)``.  Each split keeps the sum
    of its block, so every block of every level keeps its mean (Cahalan et al. 1994);
    blocks of odd length split into children of lengths ``L // 2`` and ``L - L // 2``,
    with factors ``1 + s f 2 L_r / L`` and ``1 - s f 2 L_l / L`` that keep the sum too.
    On a square grid of ``2**m`` cells both children of every split are equally long, so
    the mean square over the grid is exactly ``prod_n (1 + f_n**2)**2``.  The wavenumber
    spectrum of a 1D bounded cascade falls as ``k**-(1 + 2 hurst)`` (Marshak et al. 1994,
    from memory), 5/3 for ``hurst = 1/3``; rows of these 2D fields show about 1.5 over
    wavenumbers 4-128 of a 512-cell grid at ``variability`` 0.2-0.5 (our measurement).

    Parameters
    ----------
    shape : tuple of int
        ``(ny, nx)``.
    rng : numpy.random.Generator
        Source of the signs.
    variability : float
        ``f_0`` [1], in [0, 1): the fluctuation of the first (largest-scale) split.
    hurst : float
        ``H`` [1], in (0, 1]: how fast the fluctuations shrink with scale.

    Returns
    -------
    numpy.ndarray, shape (ny, nx)
        Positive field whose mean over the grid is 1 (to round-off).

    References
    ----------
    Cahalan, R. F., W. Ridgway, W. J. Wiscombe, T. L. Bell and J. B. Snider (1994), The
    albedo of fractal stratocumulus clouds, J. Atmos. Sci. 51, 2434-2455.
    Marshak, A., A. Davis, R. Cahalan and W. Wiscombe (1994), Bounded cascade models as
    nonstationary multifractals, Phys. Rev. E 49, 55-69.

    Examples
    --------
    >>> w = bounded_cascade((16, 16), random_generator(0))
    >>> round(float(w.mean()), 12), bool(w.min() > 0)
    (1.0, True)
    """
    ny, nx = (int(n) for n in shape)
    if ny < 1 or nx < 1:
        raise ParameterError(f"shape must be two positive sizes; got {shape!r}")
    check_number("variability", variability, 0.0, 1.0, high_open=True)
    check_number("hurst", hurst, 0.0, 1.0, low_open=True)
    field = np.ones((ny, nx))
    levels = int(np.ceil(np.log2(max(ny, nx)))) if max(ny, nx) > 1 else 0
    for n in range(levels):
        f = variability * 2.0 ** (-n * hurst)
        blocks = 2 ** n
        bx, left_x, share_x = _block_weights(nx, blocks)
        by, left_y, share_y = _block_weights(ny, blocks)
        sign_x = rng.choice((-1.0, 1.0), size=(blocks, blocks))[by[:, None], bx[None, :]]
        field *= np.where(left_x[None, :], 1.0 + sign_x * f * share_x[None, :],
                          1.0 - sign_x * f * share_x[None, :])
        # The y split of each x child has its own sign: the cascade is not separable.
        child_x = 2 * bx + ~left_x
        sign_y = rng.choice((-1.0, 1.0), size=(blocks, 2 * blocks))[by[:, None], child_x[None, :]]
        field *= np.where(left_y[:, None], 1.0 + sign_y * f * share_y[:, None],
                          1.0 - sign_y * f * share_y[:, None])
    return field
