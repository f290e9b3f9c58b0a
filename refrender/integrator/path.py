"""Unidirectional path tracing with next-event estimation and MIS.

Estimator (per camera sample): the radiance arriving along the camera ray,
computed as a sum over path vertices.  At every vertex with a non-delta BSDF
and ``strategy`` ``nee`` or ``mis``, one light is chosen with probability
proportional to its power (Walker/Vose alias table, sampling/alias.py) and
sampled (next-event estimation); the BSDF is
then sampled to continue the path.  Emission found by a BSDF-sampled ray is
weighted 1 (``bsdf``, or after a delta lobe / at the camera), 0 (``nee``), or
by the power heuristic with the light-sampling pdf of the emitter that was
hit (``mis``; Veach & Guibas, "Optimally Combining Sampling Techniques for
Monte Carlo Rendering", SIGGRAPH 1995).  Delta lights are always sampled
explicitly.

Materials: a vertex whose BSDF is all delta lobes (mirror, smooth dielectric,
smooth conductor) does no light sampling, and the emission its sampled ray
finds counts with weight 1.  At a transmitting non-delta vertex (rough
dielectric) light sampling covers both sides, the shadow ray leaving from the
side of the light.  ``front`` (wo on the front side of the geometric normal)
tells a dielectric whether the path enters or leaves; camera paths carry
radiance (refraction scales by (n_o / n_i)^2, see materials/bsdf.py).

Path length: ``max_bounces`` counts scattering events (-1 = unlimited).
Russian roulette: once a path has scattered k >= rr_start times it continues
with probability q = min(0.95, max_c throughput_c) and its throughput is
divided by q, which keeps the estimator unbiased.

Pixel filters: the film position of a sample is drawn from the pixel filter
(filter importance sampling, sampling/filters.py) and the sample counts for
its own pixel alone, times the filter weight.

Random dimensions of one path: 0-3 camera (pixel position, lens), then 8 per
vertex: light choice, 2 light sample, 2 BSDF sample, roulette, spare, BSDF lobe choice.
"""
import math

import numpy as np
from numba import prange

from .._jit import inline, kernel
from ..limits import SAMPLE_MAX
from ..geometry.intersect import SPHERE, is_planar, surface_point, surface_uv
from ..geometry.intrinsics import cycles
from ..geometry.traverse import closest_hit_fn as closest_hit, new_stack, occluded_fn as occluded
from ..materials.bsdf import (ABSORPTION, MAT_BLACK, absorbs, bsdf_eval, bsdf_is_delta, bsdf_pdf, bsdf_sample,
                              bsdf_transmits)
from ..materials.textures import is_textured, resolve_params
from ..sampling.alias import alias_select
from ..sampling.envmap import env_pdf, env_radiance, env_sample
from ..sampling.filters import filter_offset
from ..sampling.lights import pdf_distant_cone, pdf_emitter, sample_distant_cone, sample_emitter
from ..sampling.rng import path_key, uniform
from ..sampling.warp import sample_concentric_disk

STRATEGY_BSDF = 0
STRATEGY_NEE = 1
STRATEGY_MIS = 2

LIGHT_SURFACE = 0
LIGHT_POINT = 1
LIGHT_DIRECTIONAL = 2
LIGHT_ENVIRONMENT = 3
LIGHT_SPOT = 4
LIGHT_DISTANT_CONE = 5

DIMS_CAMERA = 4
DIMS_PER_VERTEX = 8
#: relative size of the ray-origin offset (times the coordinate magnitude)
OFFSET_SCALE = 2.0 ** -32
#: shadow rays stop this fraction short of the sampled point
SHADOW_SHORTEN = 1e-9
#: a path this long ends (probability of reaching it under roulette ~ 0)
SAFETY_DEPTH = 1 << 16


@inline
def power_heuristic(a, b):
    a2 = a * a
    b2 = b * b
    if a2 + b2 <= 0.0:
        return 0.0
    if math.isinf(a2):
        return 1.0
    return a2 / (a2 + b2)


@inline
def camera_ray(cam, px, py, u3, u4):
    """World-space ray through film position (px, py) (pixels, full frame)."""
    w = cam[17]
    h = cam[18]
    aspect = w / h
    sx = 2.0 * px / w - 1.0
    sy = 1.0 - 2.0 * py / h
    proj = cam[12]
    if proj == 1.0:       # orthographic
        half = 0.5 * cam[14]
        ox, oy, oz = sx * half * aspect, sy * half, 0.0
        dx, dy, dz = 0.0, 0.0, -1.0
    else:
        t = cam[13]
        dx, dy, dz = sx * t * aspect, sy * t, -1.0
        ox, oy, oz = 0.0, 0.0, 0.0
        if proj == 2.0:   # thin lens: focus plane at distance cam[16] along -Z
            # The ray from lens point (lx, ly, 0) through the pinhole ray's
            # point on the focus plane, (dx, dy, -1) * f; its direction is
            # scaled by 1/f so that as the aperture shrinks (f-number to
            # infinity) the ray becomes the pinhole ray bit for bit.
            lx, ly = sample_concentric_disk(u3, u4)
            lx *= cam[15]
            ly *= cam[15]
            f = cam[16]
            dx, dy = dx - lx / f, dy - ly / f
            ox, oy = lx, ly
    wx = cam[0] * ox + cam[1] * oy + cam[2] * oz + cam[3]
    wy = cam[4] * ox + cam[5] * oy + cam[6] * oz + cam[7]
    wz = cam[8] * ox + cam[9] * oy + cam[10] * oz + cam[11]
    vx = cam[0] * dx + cam[1] * dy + cam[2] * dz
    vy = cam[4] * dx + cam[5] * dy + cam[6] * dz
    vz = cam[8] * dx + cam[9] * dy + cam[10] * dz
    inv = 1.0 / math.sqrt(vx * vx + vy * vy + vz * vz)
    return wx, wy, wz, vx * inv, vy * inv, vz * inv


@inline
def spot_factor(ld, vx, vy, vz, dist):
    """Angular falloff times distance window of a spot light row ``ld`` toward
    the unit direction v (from the light) at distance ``dist``:
    clamp(cos(theta) s + o, 0, 1)^2 * clamp(1 - (dist / range)^4, 0, 1)
    (KHR_lights_punctual; see geometry.compile.spot_falloff)."""
    c = vx * ld[6] + vy * ld[7] + vz * ld[8]
    a = min(max(c * ld[9] + ld[10], 0.0), 1.0)
    a *= a
    rng = ld[11]
    if not math.isinf(rng):
        q = dist / rng
        q *= q
        a *= min(max(1.0 - q * q, 0.0), 1.0)
    return a


@inline
def sample_light(S, L, mode, x, y, z, sx, sy, sz, u_sel, u1, u2):
    """Choose one light (probability proportional to power) and sample it from x.

    Returns wi (unit, from x), its radiance-like factor (radiance for area and
    environment lights, I/d^2 for a point light, irradiance for a directional
    one), the pdf (solid angle times selection probability; for delta lights
    just the selection probability), the delta flag, and the shadow ray from
    the offset origin s: unit direction, maximum distance and the light's own
    primitive to ignore (-1 if none), and the index of the chosen light in
    the light table.  pdf == 0: no contribution.
    """
    li = alias_select(L.alias_prob, L.alias_index, u_sel)
    pmf = L.light_pmf[li]
    ltype = L.light_type[li]
    ld = L.light_data[li]
    if ltype == LIGHT_SURFACE:
        lp = L.light_prim[li]
        lk = S.prim_type[lp]
        g = S.prim_geom[lp]
        qx, qy, qz, mx, my, mz, pdf_dir = sample_emitter(lk, g, S.prim_area[lp], mode,
                                                         x, y, z, u1, u2)
        if not (pdf_dir > 0.0) or math.isinf(pdf_dir):
            return 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, False, 0.0, 0.0, 1.0, 0.0, -1, li
        wx = qx - x
        wy = qy - y
        wz = qz - z
        dist = math.sqrt(wx * wx + wy * wy + wz * wz)
        if not (dist > 0.0):
            return 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, False, 0.0, 0.0, 1.0, 0.0, -1, li
        wx /= dist
        wy /= dist
        wz /= dist
        front = wx * mx + wy * my + wz * mz < 0.0
        lobj = S.prim_object[lp]
        if not front:
            if S.obj_emits_both_sides[lobj] != 1:
                return 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, False, 0.0, 0.0, 1.0, 0.0, -1, li
            # a sphere hides its far side from an outside point; judged from the
            # offset origin, so that a point on the sphere itself counts as being
            # on the side its shading normal faces
            if lk == SPHERE:
                cx = sx - g[0]
                cy = sy - g[1]
                cz = sz - g[2]
                if cx * cx + cy * cy + cz * cz > g[3] * g[3]:
                    return 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, False, 0.0, 0.0, 1.0, 0.0, -1, li
        em = S.obj_emission[lobj]
        sdx = qx - sx
        sdy = qy - sy
        sdz = qz - sz
        sd = math.sqrt(sdx * sdx + sdy * sdy + sdz * sdz)
        return (wx, wy, wz, em[0], em[1], em[2], pmf * pdf_dir, False,
                sdx / sd, sdy / sd, sdz / sd, sd * (1.0 - SHADOW_SHORTEN), lp, li)
    if ltype == LIGHT_POINT or ltype == LIGHT_SPOT:
        wx = ld[0] - x
        wy = ld[1] - y
        wz = ld[2] - z
        d2 = wx * wx + wy * wy + wz * wz
        dist = math.sqrt(d2)
        if not (dist > 0.0):
            return 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, False, 0.0, 0.0, 1.0, 0.0, -1, li
        wx /= dist
        wy /= dist
        wz /= dist
        if ltype == LIGHT_POINT:
            er, eg, eb = ld[3] / d2, ld[4] / d2, ld[5] / d2
        else:
            fall = spot_factor(ld, -wx, -wy, -wz, dist)
            if not (fall > 0.0):
                return 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, False, 0.0, 0.0, 1.0, 0.0, -1, li
            fall /= d2
            er, eg, eb = ld[3] * fall, ld[4] * fall, ld[5] * fall
        sdx = ld[0] - sx
        sdy = ld[1] - sy
        sdz = ld[2] - sz
        sd = math.sqrt(sdx * sdx + sdy * sdy + sdz * sdz)
        return (wx, wy, wz, er, eg, eb, pmf, True,
                sdx / sd, sdy / sd, sdz / sd, sd * (1.0 - SHADOW_SHORTEN), -1, li)
    if ltype == LIGHT_DIRECTIONAL:
        return (-ld[0], -ld[1], -ld[2], ld[3], ld[4], ld[5], pmf, True,
                -ld[0], -ld[1], -ld[2], math.inf, -1, li)
    if ltype == LIGHT_DISTANT_CONE:
        wx, wy, wz, pdf_c = sample_distant_cone(-ld[0], -ld[1], -ld[2], ld[6], u1, u2)
        return (wx, wy, wz, ld[3], ld[4], ld[5], pmf * pdf_c, False,
                wx, wy, wz, math.inf, -1, li)
    wx, wy, wz, pdf_e, er, eg, eb = env_sample(L.env, L.env_image, L.env_pmf, L.env_marg,
                                               L.env_cond, u1, u2)
    if not (pdf_e > 0.0):
        return 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0, False, 0.0, 0.0, 1.0, 0.0, -1, li
    return (wx, wy, wz, er, eg, eb, pmf * pdf_e, False,
            wx, wy, wz, math.inf, -1, li)


#: lay_misc entries: [0] 1 if any layer is on, [1] slot of the environment's
#: light group (-1: none), [2] first of the auxiliary slots (-1: none)
LAY_ON = 0
LAY_ENV = 1
LAY_AUX = 2
LAY_MISC_LEN = 3
#: auxiliary slots from lay_misc[LAY_AUX]: normal, position, depth (channel 0),
#: albedo (directional-hemispherical reflectance estimate of the first hit)
AUX_NORMAL = 0
AUX_POSITION = 1
AUX_DEPTH = 2
AUX_ALBEDO = 3
AUX_SLOTS = 4


@inline
def add_layers(lay, lay_depth, gslot, k, cr, cg, cb):
    """Add one contribution (scattering count k, light-group slot gslot) to the
    decomposition slots: one slot per kind of lay_depth rows, and the group."""
    nk = lay_depth.shape[0]
    if nk > 0:
        kk = min(k, lay_depth.shape[1] - 1)
        for j in range(nk):
            sl = lay_depth[j, kk]
            lay[sl, 0] += cr
            lay[sl, 1] += cg
            lay[sl, 2] += cb
    if gslot >= 0:
        lay[gslot, 0] += cr
        lay[gslot, 1] += cg
        lay[gslot, 2] += cb


@kernel
def trace_path(S, L, cam, key, px, py, max_bounces, rr_start, strategy, mode, timed,
               stack, mscratch, lay, lay_depth, lay_obj, lay_light, lay_misc):
    """One camera sample.  Returns (r, g, b, rays traced, cycles in traversal).

    ``stack`` (new_stack) and ``mscratch`` (material row with textures
    applied) are scratch space reused across paths.  With ``timed`` the CPU
    cycles spent in closest_hit/occluded are counted (for the traversal
    share in the render statistics; never in the image).

    Layers (with ``lay_misc[LAY_ON]``): ``lay`` (slots, 3) is zeroed and
    receives every contribution of the path split by scattering count
    (``lay_depth[kind, min(k, K)]`` is the slot of count k in each kind) and by
    light group (``lay_obj[object]`` for emission found by a ray,
    ``lay_light[light]`` for next-event estimation, ``lay_misc[LAY_ENV]`` for
    the environment on escape; -1 = no group layer), plus the auxiliary
    first-hit values.  The beauty (r, g, b) is computed exactly as without
    layers."""
    tcyc = 0
    lay_on = lay_misc[LAY_ON] == 1
    aux = lay_misc[LAY_AUX]
    if lay_on:
        lay[:, :] = 0.0
    # np.int64(): a constant argument would compile one specialisation per value
    ox, oy, oz, dx, dy, dz = camera_ray(cam, px, py, uniform(key, np.int64(2)),
                                        uniform(key, np.int64(3)))
    tr = 1.0
    tg = 1.0
    tb = 1.0
    lr = 0.0
    lg = 0.0
    lb = 0.0
    rays = 0
    depth = 0
    # np.int64: a literal -1 first types closest_hit with Literal[int](-1) and
    # compiles it a second time for int64 (seconds of cold compile)
    skip = np.int64(-1)
    prev_x = ox
    prev_y = oy
    prev_z = oz
    prev_pdf = 0.0
    prev_delta = True
    n_lights = L.light_pmf.shape[0]
    env = L.env
    nodes_i = S.nodes.view(np.int32)
    has_env = (env[0] > 0.0 or env[1] > 0.0 or env[2] > 0.0) and L.env_image.shape[0] > 0
    while True:
        if timed:
            c0 = cycles()
        prim, t, hu, hv = closest_hit(S.nodes, nodes_i,
                                      S.prim_type, S.prim_geom, stack, ox, oy, oz, dx, dy, dz,
                                      0.0, math.inf, skip)
        if timed:
            tcyc += cycles() - c0
        rays += 1
        if prim < 0:
            for ci in range(L.cones.shape[0]):
                cd = L.cones[ci]
                pc = pdf_distant_cone(cd[0], cd[1], cd[2], cd[6], dx, dy, dz)
                if pc > 0.0:
                    if prev_delta or strategy == STRATEGY_BSDF:
                        w = 1.0
                    elif strategy == STRATEGY_NEE:
                        w = 0.0
                    else:
                        w = power_heuristic(prev_pdf, cd[7] * pc)
                    lr += tr * cd[3] * w
                    lg += tg * cd[4] * w
                    lb += tb * cd[5] * w
                    if lay_on:
                        gi = n_lights + ci         # the discs follow the table in lay_light
                        add_layers(lay, lay_depth, lay_light[gi] if lay_light.shape[0] > gi else -1,
                                   depth, tr * cd[3] * w, tg * cd[4] * w, tb * cd[5] * w)
            if has_env:
                if prev_delta or strategy == STRATEGY_BSDF:
                    w = 1.0
                elif strategy == STRATEGY_NEE:
                    w = 0.0
                else:
                    w = power_heuristic(prev_pdf, env[3] * env_pdf(env, L.env_image, L.env_pmf,
                                                                   dx, dy, dz))
                er, eg, eb = env_radiance(env, L.env_image, dx, dy, dz)
                lr += tr * er * w
                lg += tg * eg * w
                lb += tb * eb * w
                if lay_on:
                    add_layers(lay, lay_depth, lay_misc[LAY_ENV], depth,
                               tr * er * w, tg * eg * w, tb * eb * w)
            break
        kind = S.prim_type[prim]
        g = S.prim_geom[prim]
        x, y, z, nx, ny, nz = surface_point(kind, g, ox, oy, oz, dx, dy, dz, t, hu, hv)
        obj = S.prim_object[prim]
        cos_in = dx * nx + dy * ny + dz * nz
        if cos_in > 0.0:
            # the segment ran inside this surface's body: Beer-Lambert absorption
            amat = S.obj_material[obj]
            if absorbs(S.mat_type[amat], S.mat_params[amat]):
                ap = S.mat_params[amat]
                tr *= math.exp(-ap[ABSORPTION] * t)
                tg *= math.exp(-ap[ABSORPTION + 1] * t)
                tb *= math.exp(-ap[ABSORPTION + 2] * t)
        if lay_on and aux >= 0 and depth == 0:
            a = aux + AUX_NORMAL
            lay[a, 0] = nx
            lay[a, 1] = ny
            lay[a, 2] = nz
            a = aux + AUX_POSITION
            lay[a, 0] = x
            lay[a, 1] = y
            lay[a, 2] = z
            lay[aux + AUX_DEPTH, 0] = t
        # emission
        em = S.obj_emission[obj]
        if (em[0] > 0.0 or em[1] > 0.0 or em[2] > 0.0) and (cos_in < 0.0 or S.obj_emits_both_sides[obj] == 1):
            if prev_delta or strategy == STRATEGY_BSDF:
                w = 1.0
            elif strategy == STRATEGY_NEE:
                w = 0.0
            else:
                pl = L.prim_light_pmf[prim] * pdf_emitter(
                    kind, g, S.prim_area[prim], mode, prev_x, prev_y, prev_z, x, y, z, nx, ny, nz)
                w = power_heuristic(prev_pdf, pl)
            lr += tr * em[0] * w
            lg += tg * em[1] * w
            lb += tb * em[2] * w
            if lay_on:
                add_layers(lay, lay_depth, lay_obj[obj] if lay_obj.shape[0] > 0 else -1, depth,
                           tr * em[0] * w, tg * em[1] * w, tb * em[2] * w)
        if max_bounces >= 0 and depth >= max_bounces:
            break
        mat = S.obj_material[obj]
        mkind = S.mat_type[mat]
        if mkind == MAT_BLACK:
            break
        mp = S.mat_params[mat]
        if is_textured(mp):
            tu, tv = surface_uv(kind, g, S.prim_uv[min(prim, S.prim_uv.shape[0] - 1)], x, y, z, hu, hv)
            resolve_params(mkind, mp, S.tex_info, S.tex_data, tu, tv, mscratch)
            mp = mscratch
        # wo on the front side (outside of a dielectric), decided by the geometric normal
        front = cos_in < 0.0
        # shading frame on the side of the incoming ray
        if cos_in > 0.0:
            nx = -nx
            ny = -ny
            nz = -nz
        wox = -dx
        woy = -dy
        woz = -dz
        eps = OFFSET_SCALE * (max(abs(x), abs(y), abs(z)) + S.prim_scale[prim])
        sx = x + eps * nx
        sy = y + eps * ny
        sz = z + eps * nz
        self_skip = prim if is_planar(kind) else -1
        dim = DIMS_CAMERA + depth * DIMS_PER_VERTEX
        # ---- next-event estimation
        if n_lights > 0 and not bsdf_is_delta(mkind):
            (wix, wiy, wiz, er, eg, eb, pdf_l, delta, sdx, sdy, sdz, smax, lp, li) = sample_light(
                S, L, mode, x, y, z, sx, sy, sz, uniform(key, dim), uniform(key, dim + 1),
                uniform(key, dim + 2))
            cos_i = wix * nx + wiy * ny + wiz * nz
            qx, qy, qz = sx, sy, sz
            below = cos_i < 0.0 and bsdf_transmits(mkind)
            if below and pdf_l > 0.0:
                # a light behind a transmitting surface: shadow ray from the other side
                qx = x - eps * nx
                qy = y - eps * ny
                qz = z - eps * nz
                if not math.isinf(smax):
                    reach = smax / (1.0 - SHADOW_SHORTEN)
                    sdx = sx + sdx * reach - qx
                    sdy = sy + sdy * reach - qy
                    sdz = sz + sdz * reach - qz
                    sd = math.sqrt(sdx * sdx + sdy * sdy + sdz * sdz)
                    sdx /= sd
                    sdy /= sd
                    sdz /= sd
                    smax = sd * (1.0 - SHADOW_SHORTEN)
            if pdf_l > 0.0 and (cos_i > 0.0 or below):
                rays += 1
                if timed:
                    c0 = cycles()
                blocked = occluded(S.nodes, nodes_i, S.prim_type,
                                   S.prim_geom, stack, qx, qy, qz, sdx, sdy, sdz, 0.0, smax,
                                   self_skip, lp)
                if timed:
                    tcyc += cycles() - c0
                if not blocked:
                    fr, fg, fb = bsdf_eval(mkind, mp, front, nx, ny, nz, wox, woy, woz,
                                           wix, wiy, wiz)
                    if delta or strategy == STRATEGY_NEE:
                        w = 1.0
                    else:
                        w = power_heuristic(pdf_l, bsdf_pdf(mkind, mp, front, nx, ny, nz, wox,
                                                            woy, woz, wix, wiy, wiz))
                    c = abs(cos_i) * w / pdf_l
                    lr += tr * fr * er * c
                    lg += tg * fg * eg * c
                    lb += tb * fb * eb * c
                    if lay_on:
                        add_layers(lay, lay_depth, lay_light[li] if lay_light.shape[0] > 0 else -1,
                                   depth + 1, tr * fr * er * c, tg * fg * eg * c, tb * fb * eb * c)
        # ---- continue the path by sampling the BSDF
        wix, wiy, wiz, fr, fg, fb, pdf_b, is_delta = bsdf_sample(
            mkind, mp, front, nx, ny, nz, wox, woy, woz, uniform(key, dim + 3),
            uniform(key, dim + 4), uniform(key, dim + 6))
        if not (pdf_b > 0.0):
            break
        cos_i = abs(wix * nx + wiy * ny + wiz * nz)
        if lay_on and aux >= 0 and depth == 0:
            a = aux + AUX_ALBEDO
            lay[a, 0] = fr * cos_i / pdf_b
            lay[a, 1] = fg * cos_i / pdf_b
            lay[a, 2] = fb * cos_i / pdf_b
        tr *= fr * cos_i / pdf_b
        tg *= fg * cos_i / pdf_b
        tb *= fb * cos_i / pdf_b
        depth += 1
        if depth >= rr_start:
            q = min(0.95, max(tr, tg, tb))
            if not (uniform(key, dim + 5) < q):
                break
            tr /= q
            tg /= q
            tb /= q
        if depth >= SAFETY_DEPTH:
            break
        prev_x = x
        prev_y = y
        prev_z = z
        prev_pdf = pdf_b
        prev_delta = is_delta
        # transmission would start on the other side
        if wix * nx + wiy * ny + wiz * nz < 0.0:
            ox = x - eps * nx
            oy = y - eps * ny
            oz = z - eps * nz
        else:
            ox = sx
            oy = sy
            oz = sz
        dx = wix
        dy = wiy
        dz = wiz
        skip = self_skip
    return lr, lg, lb, rays, tcyc


#: one path in TIME_EVERY is timed for the traversal share (the cycle counter
#: costs tens of cycles per read)
TIME_EVERY = 16


@kernel
def render_rows(S, L, cam, seed, max_bounces, rr_start, strategy, mode,
                x0, y0, x1, y1, width, first_sample, n_samples, row_order, lo, hi,
                acc_sum, acc_sq, acc_n, row_rays, row_bad, row_time,
                filt, fcdf, fpdf, lay_depth, lay_obj, lay_light, lay_misc, acc_lsum, acc_lsq):
    """Add samples first_sample .. first_sample + n_samples - 1 of every pixel
    of rows ``row_order[lo:hi]`` (see render_pass)."""
    stack = new_stack()                          # scratch of every path of these rows
    mscratch = np.empty(S.mat_params.shape[1])
    n_slots = acc_lsum.shape[2]
    lay = np.zeros((n_slots, 3))
    square = filt[5] == 1.0                      # box of radius 0.5: the historical path
    for ii in range(lo, hi):
        r = row_order[ii]
        yy = y0 + r
        rays = 0
        bad = 0
        for xx in range(x0, x1):
            c = xx - x0
            pixel = yy * width + xx
            for s in range(first_sample, first_sample + n_samples):
                key = path_key(seed, pixel, s)
                wgt = 1.0
                if square:
                    px = xx + uniform(key, np.int64(0))   # (see trace_path)
                    py = yy + uniform(key, np.int64(1))
                else:
                    # filter importance sampling: offsets from the pixel centre drawn
                    # from the filter, weight f / (p * integral of f) per axis
                    ox, wx = filter_offset(filt, fcdf, fpdf, uniform(key, np.int64(0)))
                    oy, wy = filter_offset(filt, fcdf, fpdf, uniform(key, np.int64(1)))
                    px = xx + 0.5 + ox
                    py = yy + 0.5 + oy
                    wgt = wx * wy
                # one path in TIME_EVERY is timed (cycles of the whole path and
                # of its traversal calls) for the traversal share
                timed = (pixel + s) % TIME_EVERY == 0
                if timed:
                    p0 = cycles()
                vr, vg, vb, nr, tc = trace_path(S, L, cam, key, px, py, max_bounces, rr_start,
                                                strategy, mode, timed, stack, mscratch,
                                                lay, lay_depth, lay_obj, lay_light, lay_misc)
                if not square:
                    vr *= wgt
                    vg *= wgt
                    vb *= wgt
                if timed:
                    row_time[r, 0] += cycles() - p0
                    row_time[r, 1] += tc
                rays += nr
                # a non-finite sample, or one whose square could overflow the
                # float64 sums (see refrender/limits.py), is excluded and counted
                if abs(vr) <= SAMPLE_MAX and abs(vg) <= SAMPLE_MAX and abs(vb) <= SAMPLE_MAX:
                    acc_sum[r, c, 0] += vr
                    acc_sum[r, c, 1] += vg
                    acc_sum[r, c, 2] += vb
                    acc_sq[r, c, 0] += vr * vr
                    acc_sq[r, c, 1] += vg * vg
                    acc_sq[r, c, 2] += vb * vb
                    acc_n[r, c] += 1
                    for sl in range(n_slots):
                        for ch in range(3):
                            v = lay[sl, ch] * wgt
                            acc_lsum[r, c, sl, ch] += v
                            acc_lsq[r, c, sl, ch] += v * v
                else:
                    bad += 1
        row_rays[r] += rays
        row_bad[r] += bad
    return 0


@kernel(parallel=True)
def render_pass(S, L, cam, seed, max_bounces, rr_start, strategy, mode,
                x0, y0, x1, y1, width, first_sample, n_samples, row_order,
                acc_sum, acc_sq, acc_n, row_rays, row_bad, row_time,
                filt, fcdf, fpdf, lay_depth, lay_obj, lay_light, lay_misc, acc_lsum, acc_lsq):
    """Add samples first_sample .. first_sample + n_samples - 1 of every pixel.

    Each row of the window is one independent work item; inside it, pixels and
    samples are visited in a fixed order, so the accumulators do not depend on
    the thread count.  ``acc_sum``/``acc_sq`` (h, w, 3) float64 sum of values
    and of squares, ``acc_n`` (h, w) int64 valid samples; non-finite samples
    are excluded and counted in ``row_bad``.  ``row_time`` (h, 2) int64 adds
    the CPU cycles of the timed paths (one in TIME_EVERY) and of their
    traversal calls, for ``stats["traversal_share"]``.

    ``filt``/``fcdf``/``fpdf``: the pixel filter (sampling/filters.py).
    ``acc_lsum``/``acc_lsq`` (h, w, slots, 3): sums and sums of squares of the
    layer slots (see trace_path), weighted like the beauty sample.

    The parallel loop only calls the separately compiled render_rows, so it
    is small and quick to compile (a parallel loop around the whole path
    tracer took seconds more); numba's own threads run it (measured faster
    than Python threads calling render_rows: 2.6-2.7 vs 1.7-2.4 Mrays/s on
    the demo scene, 2 threads).
    """
    for ii in prange(row_order.shape[0]):
        # np.int64: the loop index is int64 when the loop is typed and uint64
        # in the parallel body; render_rows was compiled for both
        lo = np.int64(ii)
        render_rows(S, L, cam, seed, max_bounces, rr_start, strategy, mode,
                    x0, y0, x1, y1, width, first_sample, n_samples, row_order, lo, lo + 1,
                    acc_sum, acc_sq, acc_n, row_rays, row_bad, row_time,
                    filt, fcdf, fpdf, lay_depth, lay_obj, lay_light, lay_misc, acc_lsum, acc_lsq)
    return 0
