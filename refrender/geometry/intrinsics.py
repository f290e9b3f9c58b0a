"""LLVM-level helpers for the traversal kernels, exposed to numba as intrinsics.

- ``prefetch(arr, byte_offset)``: software prefetch.
- ``box8_entry(...)``: slab test of a ray against the eight child boxes of a
  wide BVH node in one vector operation.

``prefetch(arr, byte_offset)`` asks the CPU to bring the cache line holding
byte ``byte_offset`` of ``arr``'s data into all cache levels
(``llvm.prefetch``, read, locality 3, data cache).  It is only a hint: it
never faults, so an offset past the end of the array is harmless, and it
changes no result.
"""
from llvmlite import ir
from numba import types
from numba.core import cgutils
from numba.extending import intrinsic


@intrinsic
def prefetch(typingctx, arr, byte_offset):
    if not isinstance(arr, types.Array) or not isinstance(byte_offset, types.Integer):
        return None
    sig = types.void(arr, byte_offset)

    def codegen(context, builder, signature, args):
        ary = context.make_array(signature.args[0])(context, builder, args[0])
        i8p = ir.IntType(8).as_pointer()
        off = context.cast(builder, args[1], signature.args[1], types.intp)
        ptr = builder.gep(builder.bitcast(ary.data, i8p), [off])
        i32 = ir.IntType(32)
        fnty = ir.FunctionType(ir.VoidType(), [i8p, i32, i32, i32])
        fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.prefetch")
        builder.call(fn, [ptr, ir.Constant(i32, 0), ir.Constant(i32, 3), ir.Constant(i32, 1)])
        return context.get_dummy_value()

    return sig, codegen


_F64 = ir.DoubleType()
_V8F32 = ir.VectorType(ir.FloatType(), 8)
_V8F64 = ir.VectorType(_F64, 8)


@intrinsic
def box8_entry(typingctx, nodes, base, ox, oy, oz, ix, iy, iz, nx, ny, nz, tmax, tout, toff):
    """Entry distances of a ray into the 8 child boxes of a wide node.

    ``nodes`` float32 (1-D, C): plane ``p`` (min x, y, z, max x, y, z) of child
    ``c`` at ``nodes[base + 8 p + c]``; ``ix, iy, iz`` the inverse direction;
    ``nx, ny, nz`` the near-plane offsets (0 or 3) from the direction's signs.
    Computes, exactly as the scalar slab test (float64, same operations, same
    order, the exit widened by the same factor), for every child:
    ``tn = max(tx0, ty0, tz0, 0)``, ``tf = min(tx1, ty1, tz1, tmax) * (1 + 2^-51)``,
    stores the eight ``tn`` in ``tout[toff:toff + 8]`` (float64) and returns the bit
    mask (int64) of the children with ``tn <= tf``.  No NaN can arise for
    finite origins and inverse directions; boxes with min > max (empty
    slots) are never entered.
    """
    if not (isinstance(nodes, types.Array) and nodes.dtype == types.float32
            and isinstance(tout, types.Array) and tout.dtype == types.float64):
        return None
    sig = types.int64(nodes, base, ox, oy, oz, ix, iy, iz, nx, ny, nz, tmax, tout, toff)

    def codegen(context, builder, signature, args):
        (a_nodes, a_base, a_ox, a_oy, a_oz, a_ix, a_iy, a_iz,
         a_nx, a_ny, a_nz, a_tmax, a_tout, a_toff) = args
        st = signature.args
        ary = context.make_array(st[0])(context, builder, a_nodes)
        out = context.make_array(st[12])(context, builder, a_tout)
        intp = context.get_value_type(types.intp)
        base_i = context.cast(builder, a_base, st[1], types.intp)
        data = ary.data

        def cast_f(v, t):
            return context.cast(builder, v, t, types.float64)

        def cast_i(v, t):
            return context.cast(builder, v, t, types.intp)

        def splat(x):
            vec = ir.Constant(_V8F64, ir.Undefined)
            vec = builder.insert_element(vec, x, ir.Constant(ir.IntType(32), 0))
            return builder.shuffle_vector(vec, ir.Constant(_V8F64, ir.Undefined),
                                          ir.Constant(ir.VectorType(ir.IntType(32), 8), [0] * 8))

        def load_plane(plane):
            off = builder.add(base_i, builder.mul(plane, ir.Constant(intp, 8)))
            ptr = builder.gep(data, [off])
            vptr = builder.bitcast(ptr, _V8F32.as_pointer())
            v = builder.load(vptr, align=4)
            return builder.fpext(v, _V8F64)

        three = ir.Constant(intp, 3)
        axes = []
        for axis, (o, io, n) in enumerate(((a_ox, a_ix, a_nx), (a_oy, a_iy, a_ny), (a_oz, a_iz, a_nz))):
            k = 4 + axis
            ov = splat(cast_f(o, st[2 + axis]))
            iv = splat(cast_f(io, st[5 + axis]))
            nv = cast_i(n, st[8 + axis])
            near = builder.add(ir.Constant(intp, axis), nv)
            far = builder.sub(ir.Constant(intp, axis + 3), nv)
            t0 = builder.fmul(builder.fsub(load_plane(near), ov), iv)
            t1 = builder.fmul(builder.fsub(load_plane(far), ov), iv)
            axes.append((t0, t1))
        del three

        def vmax(a, b):
            return builder.select(builder.fcmp_ordered(">", a, b), a, b)

        def vmin(a, b):
            return builder.select(builder.fcmp_ordered("<", a, b), a, b)

        zero = ir.Constant(_V8F64, [0.0] * 8)
        tmaxv = splat(cast_f(a_tmax, st[11]))
        tn = vmax(vmax(axes[0][0], axes[1][0]), vmax(axes[2][0], zero))
        tf = vmin(vmin(axes[0][1], axes[1][1]), vmin(axes[2][1], tmaxv))
        tf = builder.fmul(tf, ir.Constant(_V8F64, [1.0000000000000004] * 8))
        hit = builder.fcmp_ordered("<=", tn, tf)
        bits = builder.bitcast(hit, ir.IntType(8))
        toff = context.cast(builder, a_toff, st[13], types.intp)
        optr = builder.bitcast(builder.gep(out.data, [toff]), _V8F64.as_pointer())
        builder.store(tn, optr, align=8)
        return builder.zext(bits, ir.IntType(64))

    return sig, codegen


def _int64_call(builder, name, args, extra=()):
    i64 = ir.IntType(64)
    fnty = ir.FunctionType(i64, [i64] + [a.type for a in extra])
    fn = cgutils.get_or_insert_function(builder.module, fnty, name)
    return builder.call(fn, list(args) + list(extra))


@intrinsic
def popcount(typingctx, x):
    """Number of set bits of an integer (as int64)."""
    if not isinstance(x, types.Integer):
        return None

    def codegen(context, builder, signature, args):
        v = context.cast(builder, args[0], signature.args[0], types.int64)
        return _int64_call(builder, "llvm.ctpop.i64", [v])

    return types.int64(x), codegen


@intrinsic
def lowest_bit(typingctx, x):
    """Index of the lowest set bit of an integer (64 for zero)."""
    if not isinstance(x, types.Integer):
        return None

    def codegen(context, builder, signature, args):
        v = context.cast(builder, args[0], signature.args[0], types.int64)
        return _int64_call(builder, "llvm.cttz.i64", [v], [ir.Constant(ir.IntType(1), 0)])

    return types.int64(x), codegen


@intrinsic
def cycles(typingctx):
    """The CPU's cycle (time-stamp) counter, for measuring shares of time.

    Only differences taken on one thread within one kernel call mean
    anything; the values never enter a result.
    """
    def codegen(context, builder, signature, args):
        fnty = ir.FunctionType(ir.IntType(64), [])
        fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.readcyclecounter")
        return builder.call(fn, [])

    return types.int64(), codegen
