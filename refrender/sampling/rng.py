"""Counter-based random numbers.

Every random number is a pure function of (seed, pixel, sample index,
dimension): ``uniform(path_key(seed, pixel, sample), dim)``.  No state is
carried between samples, so the image does not depend on the thread count,
and disjoint sample ranges merge into the render of their union.

The mixing function is the splitmix64 finaliser (Steele, Lea & Flood,
"Fast splittable pseudorandom number generators", OOPSLA 2014), applied in a
chain to combine the counters.
"""
import numpy as np

from .._jit import inline

_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_S30 = np.uint64(30)
_S27 = np.uint64(27)
_S31 = np.uint64(31)
_S11 = np.uint64(11)
_INV53 = 1.0 / 9007199254740992.0  # 2**-53


@inline
def mix64(z):
    """splitmix64 finaliser: a bijective 64-bit avalanche mix (uint64 -> uint64)."""
    z = (z ^ (z >> _S30)) * _M1
    z = (z ^ (z >> _S27)) * _M2
    return z ^ (z >> _S31)


@inline
def path_key(seed, pixel, sample):
    """64-bit key of one camera path; arguments are non-negative integers."""
    k = mix64(np.uint64(seed) + _GOLDEN)
    k = mix64(k ^ np.uint64(pixel))
    k = mix64(k + _GOLDEN ^ np.uint64(sample))
    return k


@inline
def uniform(key, dim):
    """Uniform float64 in [0, 1) for dimension ``dim`` of the path ``key``."""
    z = mix64(key + np.uint64(dim + 1) * _GOLDEN)
    return np.float64(z >> _S11) * _INV53
