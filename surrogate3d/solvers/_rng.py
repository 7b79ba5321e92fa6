"""Counter-seeded xoshiro256** random streams for the Monte Carlo kernels (numba).

Every photon batch owns a stream derived from (seed, batch index) with splitmix64, so
results do not depend on how batches are spread over threads or workers.

References
----------
Blackman, D. and Vigna, S., 2021: Scrambled linear pseudorandom number generators.
ACM Trans. Math. Softw. 47, 36.
Steele, G. L., Lea, D. and Flood, C. H., 2014: Fast splittable pseudorandom number
generators. OOPSLA 2014 (splitmix64).
"""

import numpy as np
from numba import njit, uint64

_GOLDEN = uint64(0x9E3779B97F4A7C15)
_MIX1 = uint64(0xBF58476D1CE4E5B9)
_MIX2 = uint64(0x94D049BB133111EB)
_TO_UNIT = 1.0 / 9007199254740992.0  # 2**-53


@njit(cache=True, inline="always")
def _splitmix64(x):
    z = x + _GOLDEN
    z = (z ^ (z >> uint64(30))) * _MIX1
    z = (z ^ (z >> uint64(27))) * _MIX2
    return z ^ (z >> uint64(31)), z


@njit(cache=True)
def seed_stream(state, seed, stream):
    """Fill ``state`` (uint64[4]) for stream number ``stream`` of ``seed``."""
    x = uint64(seed) * _GOLDEN ^ (uint64(stream) + uint64(0x632BE59BD9B4E019))
    for i in range(4):
        out, x = _splitmix64(x)
        state[i] = out


@njit(cache=True, inline="always")
def _rotl(x, k):
    return (x << uint64(k)) | (x >> uint64(64 - k))


@njit(cache=True, inline="always")
def next_uint64(state):
    """Advance xoshiro256** and return the next 64-bit output."""
    s0, s1, s2, s3 = state[0], state[1], state[2], state[3]
    result = _rotl(s1 * uint64(5), 7) * uint64(9)
    t = s1 << uint64(17)
    s2 ^= s0
    s3 ^= s1
    s1 ^= s2
    s0 ^= s3
    s2 ^= t
    s3 = _rotl(s3, 45)
    state[0], state[1], state[2], state[3] = s0, s1, s2, s3
    return result


@njit(cache=True, inline="always")
def uniform(state):
    """A uniform double in [0, 1) from the top 53 bits."""
    return float(next_uint64(state) >> uint64(11)) * _TO_UNIT


@njit(cache=True, inline="always")
def uniform_open(state):
    """A uniform double in (0, 1], safe for ``-log``."""
    return 1.0 - uniform(state)


def new_state():
    """An empty stream state (uint64[4])."""
    return np.zeros(4, dtype=np.uint64)
