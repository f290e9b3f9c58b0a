"""The numeric limits of refrender's inputs, derived from float64 (IEEE 754 binary64).

Every value that reaches a kernel has passed the check of its input kind
(scene, mesh/image file, state file, EXR metadata, command line) against these
limits; README section "Limits" states them for users.  Derivation:

* The estimator accumulates, per pixel and channel, the sum of the sample
  values and the sum of their squares in float64, whose largest finite value
  is about 1.798e308 = (2 - 2**-52) * 2**1023.  A render (or a merge) holds at
  most ``SPP_MAX = 2**40`` samples per pixel (sample indices lie in
  [0, 2**40)), so a sample value of magnitude at most
  ``SAMPLE_MAX = 2**490`` (about 3.2e147) keeps the sum of squares below
  2**(2*490 + 40) = 2**1020: it cannot overflow.  The path-tracing kernel
  excludes any sample beyond SAMPLE_MAX (or not finite) from the estimate and
  counts it in ``stats.nonfinite_samples``.
* Scene numbers (coordinates, lengths, radiometric values, factors) are
  bounded by ``SCENE_NUMBER_MAX = 1e30`` in magnitude.  Ray-primitive tests
  form products of at most four such values (e.g. squared distances against
  squared radii, triple products of edges), at most about 1e122: far from
  overflow.  An emission of 1e30 leaves a factor of about 1e117 between the
  largest emitted radiance and SAMPLE_MAX for the geometric factors of a path
  (1/distance^2 of point lights, 1/pdf).
* Positive sizes (radius of a sphere or disk) are at least
  ``LENGTH_MIN = 1e-30`` and every primitive's area at least
  ``AREA_MIN = 1e-60``, so that squares and areas never underflow to zero
  (a zero area would make an emitter's power and its sampling pdf undefined).
"""
from __future__ import annotations

#: largest number of samples per pixel of a render or a merge; sample indices lie in [0, SPP_MAX)
SPP_MAX = 2 ** 40
#: largest |sample value| accumulated: SAMPLE_MAX**2 * SPP_MAX = 2**1020 < float64 max
SAMPLE_MAX = 2.0 ** 490
#: largest |x| of any number in a scene document (and of transformed positions, image pixels)
SCENE_NUMBER_MAX = 1e30
#: smallest radius of a sphere or disk (scene units)
LENGTH_MIN = 1e-30
#: smallest area of one primitive (scene units squared)
AREA_MIN = 1e-60
#: largest seed (random-number key), as in the scene schema
SEED_MAX = 2 ** 63 - 1

assert SAMPLE_MAX ** 2 * SPP_MAX < 1.7976931348623157e308
