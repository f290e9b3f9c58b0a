"""Environment light: uniform, or a latitude-longitude image, importance sampled.

Orientation convention (image frame, before ``rotate_degrees``): +Y is up.
Pixel (x, y) of a W x H image covers u in [x/W, (x+1)/W), v in [y/H, (y+1)/H);
v = theta / pi with theta the angle from +Y (row 0 is the zenith, the bottom
row the nadir), and u = phi / (2 pi) + 1/2 with phi = atan2(d_x, -d_z).  So
the **image centre faces -Z** (the way a default camera looks), the
right-hand quarter (u = 3/4) faces +X, u = 1/4 faces -X and the left/right
edges face +Z.  Seen from inside, looking along -Z with +Y up, the image
appears unmirrored.  ``rotate_degrees`` then turns the map about +Y by a
right-handed rotation: world = R_y(angle) image, so +90 degrees moves the
image centre from -Z to -X.

Radiance is piecewise constant per pixel (nearest pixel, no filtering), times
``scale``.  Sampling: a 2-D piecewise-constant distribution on (u, v) with
pixel weights luminance(scale * pixel) * sin(theta at the row centre) (a
marginal over rows, a conditional over columns of each row; exact
inversion), then the direction of (u, v).  Its exact solid-angle pdf is
p(u, v) / (2 pi^2 sin theta) with p(u, v) = W H pmf[row, col] and theta the
sample's own polar angle.

``env`` parameter vector (8 floats): 0-2 radiance (uniform) or scale (image),
3 selection probability of the environment, 4 kind (0 none/uniform, 1 image),
5 cos(rotation), 6 sin(rotation), 7 unused.
"""
import math

from .._jit import inline
from .warp import INV_4PI, PI, sample_uniform_sphere

ENV_UNIFORM = 0
ENV_IMAGE = 1


@inline
def env_to_uv(env, dx, dy, dz):
    """World direction -> (u, v, sin theta) of the image."""
    c = env[5]
    s = env[6]
    ix = dx * c - dz * s
    iz = dx * s + dz * c
    iy = min(1.0, max(-1.0, dy))
    theta = math.acos(iy)
    phi = math.atan2(ix, -iz)
    u = phi / (2.0 * PI) + 0.5
    if u >= 1.0:
        u = 0.0
    return u, theta / PI, math.sqrt(ix * ix + iz * iz)


@inline
def env_from_uv(env, u, v):
    """(u, v) of the image -> unit world direction and sin theta."""
    phi = 2.0 * PI * (u - 0.5)
    theta = PI * v
    st = math.sin(theta)
    ix = st * math.sin(phi)
    iy = math.cos(theta)
    iz = -st * math.cos(phi)
    c = env[5]
    s = env[6]
    return ix * c + iz * s, iy, -ix * s + iz * c, st


@inline
def _pixel(img, u, v):
    h = img.shape[0]
    w = img.shape[1]
    col = int(u * w)
    row = int(v * h)
    if col >= w:
        col = w - 1
    if row >= h:
        row = h - 1
    if col < 0:
        col = 0
    if row < 0:
        row = 0
    return row, col


@inline
def _search(cdf, u):
    """Largest i with cdf[i] <= u (cdf[0] = 0, cdf[-1] = 1, u < 1)."""
    lo = 0
    hi = cdf.shape[0] - 2
    while lo < hi:
        mid = (lo + hi + 1) // 2
        if cdf[mid] <= u:
            lo = mid
        else:
            hi = mid - 1
    return lo


@inline
def env_radiance(env, img, dx, dy, dz):
    """Radiance (rgb) arriving from direction d (pointing away from the scene)."""
    if env[4] == ENV_IMAGE:
        u, v, st = env_to_uv(env, dx, dy, dz)
        row, col = _pixel(img, u, v)
        return env[0] * img[row, col, 0], env[1] * img[row, col, 1], env[2] * img[row, col, 2]
    return env[0], env[1], env[2]


@inline
def env_sample(env, img, pmf, marg, cond, u1, u2):
    """Direction toward the environment.  Uniform environment: uniform on the
    sphere (pdf 1/4pi); image: the piecewise-constant distribution above.

    Returns dx, dy, dz, pdf (solid angle; 0 = failed), radiance rgb.
    Pdf: env_pdf.
    """
    if env[4] != ENV_IMAGE:
        dx, dy, dz = sample_uniform_sphere(u1, u2)
        return dx, dy, dz, INV_4PI, env[0], env[1], env[2]
    h = img.shape[0]
    w = img.shape[1]
    row = _search(marg, u1)
    pr = marg[row + 1] - marg[row]
    fv = (u1 - marg[row]) / pr
    fv = min(max(fv, 0.0), 1.0 - 1e-16)
    crow = cond[row]
    col = _search(crow, u2)
    pc = crow[col + 1] - crow[col]
    fu = (u2 - crow[col]) / pc
    fu = min(max(fu, 0.0), 1.0 - 1e-16)
    v = (row + fv) / h
    u = (col + fu) / w
    dx, dy, dz, st = env_from_uv(env, u, v)
    if not (st > 0.0):
        return 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0
    pdf = pmf[row, col] * h * w / (2.0 * PI * PI * st)
    return (dx, dy, dz, pdf, env[0] * img[row, col, 0], env[1] * img[row, col, 1],
            env[2] * img[row, col, 2])


@inline
def env_pdf(env, img, pmf, dx, dy, dz):
    """Solid-angle pdf of env_sample producing direction d."""
    if env[4] != ENV_IMAGE:
        return INV_4PI
    u, v, st = env_to_uv(env, dx, dy, dz)
    if not (st > 0.0):
        return 0.0
    row, col = _pixel(img, u, v)
    return pmf[row, col] * img.shape[0] * img.shape[1] / (2.0 * PI * PI * st)


# --- Python side: the distribution of an image --------------------------------

def build_env_distribution(image, scale):
    """(pmf (h, w), marginal cdf (h + 1,), conditional cdfs (h, w + 1), power
    factor) of a lat-long image of shape (h, w, 3) times ``scale`` (3,).

    Weights: BT.709 luminance of scale * pixel times sin(theta) at the row
    centre.  The power factor is the luminance-weighted integral of the
    radiance over the sphere, sum of Y * (pixel solid angle), in W m^-2.
    """
    import numpy as np
    from ..geometry.compile import LUMINANCE
    img = np.asarray(image, dtype=np.float64)
    h, w = img.shape[:2]
    y = (img * np.asarray(scale, dtype=np.float64)) @ LUMINANCE
    theta_c = (np.arange(h) + 0.5) / h * math.pi
    weight = y * np.sin(theta_c)[:, None]
    total = weight.sum()
    edges = np.cos(np.arange(h + 1) / h * math.pi)
    pix_sa = (2.0 * math.pi / w) * (edges[:-1] - edges[1:])
    power = float((y * pix_sa[:, None]).sum())
    if not (total > 0.0):
        pmf = np.zeros((h, w))
        marg = np.linspace(0.0, 1.0, h + 1)
        cond = np.tile(np.linspace(0.0, 1.0, w + 1), (h, 1))
        return pmf, marg, cond, 0.0
    pmf = weight / total
    rows = pmf.sum(axis=1)
    marg = np.zeros(h + 1)
    marg[1:] = np.cumsum(rows)
    marg[-1] = 1.0
    cond = np.zeros((h, w + 1))
    for r in range(h):
        if rows[r] > 0.0:
            cond[r, 1:] = np.cumsum(pmf[r]) / rows[r]
        else:
            cond[r, 1:] = np.arange(1, w + 1) / w
        cond[r, -1] = 1.0
    return pmf, marg, cond, power
