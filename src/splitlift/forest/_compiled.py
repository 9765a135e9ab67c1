"""Compiled kernels of the STIT forest: growth from data, routing, node statistics, scoring.

Every kernel is compiled once by numba and cached on disk (``cache=True``),
so a fresh process loads machine code instead of compiling again. Kernels
release the GIL (``nogil=True``); the estimators run them in threads.

Trees are flat arrays over node ids. A node's two children are consecutive
(``right = left + 1``) and every child has a larger id than its parent, so
bottom-up sums run over ids in reverse and top-down fills in order.
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.extending import intrinsic

# Cells with at most this many points measure their exact extent along every
# direction at once (m × count reads); larger cells keep a stale box and tighten
# it one direction at a time, only when a proposed cut misses their points.
EXACT_EXTENT_BELOW = 32
# A cell whose lifted values fit in this many bytes is grown from a compact copy
# of its rows, so the passes over it stay in the core's cache.
LOCAL_CELL_BYTES = 1 << 19
# The copy of a cell set aside asks for the values of the point this many places ahead.
_PREFETCH_AHEAD = 8


#: One routing record per node, 16 bytes, so a step down the tree reads one cache line. A
#: leaf points to itself (``left`` = its own id, ``offset`` = +inf), so a step from a leaf
#: stays there and points can move down in lockstep without testing for leaves.
ROUTING_RECORD = np.dtype([("offset", np.float64), ("left", np.int32), ("direction", np.int32)])


@njit(cache=True, nogil=True, inline="always")
def _set_logged(box, position, value, log_position, log_value, log_length):
    """``box[position] = value``, remembering the old value; returns the new log length.

    The caller keeps room in the log: it checks once per cell, which writes at
    most ``2 m + 2`` entries.
    """
    if box[position] == value:
        return log_length
    log_position[log_length] = position
    log_value[log_length] = box[position]
    box[position] = value
    return log_length + 1


@njit(cache=True, nogil=True, inline="always")
def _partition(columns, direction, orders, buffer, start, end, cut):
    """One branch-free pass over the cell ``orders[buffer, start:end]`` along a column.

    ``columns[k, i]`` is the value of point i along direction k: the
    data's columns, or the transposed view of a compact copy's rows.

    Writes the points with ``value <= cut`` to the front and the others to
    the back of the same range in the other row of ``orders``; returns the
    number on the left and the extent (lowest, highest) along the column.
    Unsigned indices spare numba's negative-index checks in this, the
    hottest loop.
    """
    source, target = np.uint64(buffer), np.uint64(1 - buffer)
    column = np.uint64(direction)
    # the i-th point goes to start + (left so far) or to end - 1 - i + (left so far): one
    # count and one comparison per point
    left, front, back = np.uint64(0), np.uint64(start), np.uint64(end - 1)
    lowest, highest = np.inf, -np.inf
    for position in range(np.uint64(start), np.uint64(end)):
        point = orders[source, position]
        value = columns[column, point]
        lowest = min(lowest, value)
        highest = max(highest, value)
        orders[target, front + left] = point
        orders[target, back + left] = point
        left += np.uint64(value <= cut)
        back -= np.uint64(1)
    return np.int64(left), lowest, highest


@njit(cache=True, nogil=True)
def grow_from_data(rows, columns, root_box, lifetime, generator, exponent, routing, parent,
                   split_time, leaf_of_point, workspace, first_position, point_order):
    """Grow one Mondrian tree whose cells use the extent of their training points.

    Parameters
    ----------
    rows : ndarray of shape (n, m), C order
        Lifted training points.
    columns : ndarray of shape (m, n), C order
        The same values, one lifted direction per row (``rows.T`` copied).
    root_box : ndarray of shape (2 m,)
        The lowest values of the columns, then the highest (the same for
        every tree, so the caller finds them once).
    lifetime : float
        Lifetime in the units of ``rows``; ``inf`` grows until every leaf
        holds one distinct point.
    generator : numpy.random.Generator
        The tree's own random stream (seeded per tree, so the tree depends
        on its seed alone, whatever thread grows it).
    exponent : int
        The offsets are recorded multiplied by ``2**exponent``: in the units
        of the lifted data when ``rows`` hold them divided by that power.
    routing : ndarray of ROUTING_RECORD, shape (at least 2 n - 1,)
    parent : ndarray of int32, shape (at least 2 n - 1,)
    split_time : ndarray of float, shape (at least 2 n - 1,)
        Receive the tree's nodes in their first ``n_nodes`` entries. The
        caller allocates them, so that many trees can share large arrays,
        which the operating system backs with few, large pages.
    leaf_of_point : ndarray of int32, shape (n,)
        Receives the leaf of every point.
    workspace : tuple of ndarray
        Working arrays from :func:`growth_workspace`, reused tree after tree.
    first_position, point_order : ndarray of int32 (at least 2 n - 1,), of uint32 (n,)
        Receive the tree's subtree layout (as :func:`subtree_layout`) when
        not empty: the first position of every node's points, and the point
        at every position. Growth keeps each cell's points at consecutive
        positions, left child first, so it writes them as it goes.

    Returns
    -------
    n_nodes : int

    Notes
    -----
    A cell with points ``Z_C`` must wait ``Exp(Σ_i w_i)`` with
    ``w_i = max Z_C[:, i] - min Z_C[:, i]``, then be cut along i with
    probability ``w_i / Σ w`` at a uniform offset in ``[min, max]``
    (Lakshminarayanan, Roy & Teh 2014). Measuring all m widths costs
    ``m × count`` reads per cell. Instead each cell keeps a box that
    contains its points but may be larger (inherited from its parent), and
    runs the Mondrian clock of that box: waiting time ``Exp(Σ box widths)``,
    a direction ∝ box width and a uniform offset in the box. One pass over
    that single lifted column tells whether the cut separates the cell's
    points. If it does, it is the cell's cut. If it misses them, the box
    side is tightened to the points' extent along that column and the clock
    runs on. This is exact: a Mondrian process restricted to a sub-box is a
    Mondrian process on that sub-box (Roy & Teh 2008), so proposals of the
    larger box that fall outside the points' extent thin out to the process
    of the extent itself. Cells of a few points measure their extent
    exactly instead, which is cheaper than waiting for misses.

    Growth runs depth first. The box lives in one array with an undo log,
    so a child costs two logged writes instead of a copy. Cells whose
    points fit in ``LOCAL_CELL_BYTES`` are set aside and grown afterwards
    from a compact copy of their rows, so their passes stay in the cache;
    each starts from the exact box of its points, measured on the copy
    (at width 30 this halves the proposals that miss).
    Passes over the whole data read its columns; passes over a copy read
    its rows with a stride, which costs less than transposing each copy.
    """
    m, n = columns.shape
    parent[0] = -1
    _make_leaf(routing, split_time, 0)
    if point_order.size > 0:  # (as _grow_cells decides whether to record the layout)
        first_position[0] = 0

    box = root_box.copy()  # box[k] is the lower and box[m + k] the upper end along k
    box_widths = np.empty(m)

    # the root's subtree grows on the whole data until its cells are small enough to be
    # set aside; each of those then grows from a compact copy of its points
    orders, point_ids, row_store, order_store, point_store = workspace
    for i in range(n):
        orders[0, i] = i
    n_nodes, set_aside, n_set_aside = _grow_subtree(
        rows, columns, orders, point_ids, 0, 0.0, box, lifetime, point_store.size, exponent,
        routing, parent, split_time, leaf_of_point, 1, generator, 0, first_position,
        point_order)
    for item in range(n_set_aside):
        start, end = int(set_aside[item, 1]), int(set_aside[item, 2])
        count = end - start
        points = point_store[:count]
        buffer = int(set_aside[item, 3])
        for i in range(count):
            points[i] = orders[buffer, start + i]
        local_rows, local_orders = _local_copy(rows, points, row_store, order_store)
        # the exact box of the copy: proposals of the stale box would often miss its points
        _extents(local_rows, local_orders, 0, 0, count, box[:m], box[m:], box_widths)
        n_nodes = _grow_subtree(
            local_rows, local_rows.T, local_orders, points, int(set_aside[item, 0]),
            set_aside[item, 4], box, lifetime, 0, exponent, routing, parent, split_time,
            leaf_of_point, n_nodes, generator, start, first_position, point_order)[0]
    return n_nodes


def growth_workspace(n: int, m: int) -> tuple[np.ndarray, ...]:
    """Working arrays of :func:`grow_from_data` for ``n`` points in ``m`` directions.

    Allocated once per batch of trees and reused tree after tree, so that
    no tree pays for fresh memory (a page fault per page at its first write).

    Returns
    -------
    tuple
        The two rows of cell orders over the data, the points' ids, and room
        for the largest cell set aside: its rows, its orders and its ids.
    """
    # cells of at most this many points are set aside (at least two: a cut needs two points)
    local_limit = max(2, LOCAL_CELL_BYTES // (8 * m))
    return (np.empty((2, n), np.uint32), np.arange(n, dtype=np.int32),
            np.empty(local_limit * m), np.empty(2 * local_limit, np.uint32),
            np.empty(local_limit, np.int32))


@njit(cache=True, nogil=True)
def _local_copy(rows, points, row_store, order_store):
    """A compact copy of the rows of ``points`` and a first order of them, in the stores.

    The rows are read in no predictable order, so the copy asks for each a
    few points ahead (waiting for them had taken about 8% of the time to
    grow a tree at n = 1e5, m = 30).
    """
    count, m = points.size, rows.shape[1]
    local_rows = row_store[: count * m].reshape((count, m))
    for i in range(count):
        ahead = np.int64(points[min(i + _PREFETCH_AHEAD, count - 1)]) * m
        for k in range(0, m, 8):  # (eight doubles to a cache line)
            _prefetch(rows, ahead + k)
        _prefetch(rows, ahead + m - 1)
        point = points[i]
        for k in range(m):
            local_rows[i, k] = rows[point, k]
    local_orders = order_store[: 2 * count].reshape((2, count))
    for i in range(count):
        local_orders[0, i] = i
    return local_rows, local_orders


@intrinsic
def _prefetch(typingctx, array, index):
    """Ask the CPU to fetch the cache line of ``array``'s flat element ``index``."""
    def codegen(context, builder, signature, args):
        data = context.make_array(signature.args[0])(context, builder, args[0]).data
        byte_pointer = ir.IntType(8).as_pointer()
        int32 = ir.IntType(32)
        function = cgutils.get_or_insert_function(
            builder.module, ir.FunctionType(ir.VoidType(), [byte_pointer, int32, int32, int32]),
            "llvm.prefetch.p0i8")
        # read (0), keep in all cache levels (3), data cache (1)
        builder.call(function, [builder.bitcast(builder.gep(data, [args[1]]), byte_pointer),
                                int32(0), int32(3), int32(1)])
        return context.get_dummy_value()
    return types.void(array, index), codegen


@intrinsic
def _vector_extents(typingctx, rows, orders, buffer, start, end, lows, highs, widths):
    """:func:`_extents` in vector registers, four directions to a register.

    Needs ``m >= 4`` and a cell of at least one point. Each pass over the
    points' rows covers sixteen directions (four registers of lowest and four
    of highest values), so a row's index is read once per pass. A register
    starting past ``m - 4`` starts at ``m - 4`` instead and overlaps the one
    before, which min and max do not mind; its lanes already counted are left
    out of the rate. numba vectorises none of the loops that compute these
    extents, so this one is written in LLVM IR.
    """
    reals = (rows, lows, highs, widths)
    if (any(array.layout != "C" for array in (*reals, orders)) or orders.dtype != types.uint32
            or any(array.dtype != types.float64 for array in reals)):
        return None  # (the loop steps through C arrays of doubles and 32-bit point ids)
    def codegen(context, builder, signature, args):
        arrays = [context.make_array(signature.args[i])(context, builder, args[i])
                  for i in (0, 1, 5, 6, 7)]
        rows_array, orders_array, lows_array, highs_array, widths_array = arrays
        int64 = ir.IntType(64)
        double = ir.DoubleType()
        vector = ir.VectorType(double, 4)
        lanes = ir.VectorType(int64, 4)
        m = cgutils.unpack_tuple(builder, rows_array.shape)[1]
        width = cgutils.unpack_tuple(builder, orders_array.shape)[1]
        ids = builder.gep(orders_array.data, [builder.add(builder.mul(args[2], width), args[3])])
        count = builder.sub(args[4], args[3])
        lows_slots = [cgutils.alloca_once(builder, vector) for _ in range(4)]
        highs_slots = [cgutils.alloca_once(builder, vector) for _ in range(4)]
        zero = ir.Constant(vector, [0.0] * 4)
        rate_slot = cgutils.alloca_once_value(builder, zero)
        last = builder.sub(m, int64(4))
        passes = builder.udiv(builder.add(m, int64(15)), int64(16))

        def row_start(j):
            point = builder.zext(builder.load(builder.gep(ids, [j])), int64)
            return builder.gep(rows_array.data, [builder.mul(point, m)])

        def load(row, k):
            return builder.load(builder.bitcast(builder.gep(row, [k]), vector.as_pointer()),
                                align=8)

        def splat(value):
            """A vector of four copies of the integer ``value``."""
            single = builder.insert_element(ir.Constant(lanes, None), value, int64(0))
            return builder.shuffle_vector(single, ir.Constant(lanes, None),
                                          ir.Constant(ir.VectorType(ir.IntType(32), 4), [0] * 4))

        def store(value, array, k):
            builder.store(value, builder.bitcast(builder.gep(array.data, [k]),
                                                 vector.as_pointer()), align=8)

        with cgutils.for_range(builder, passes) as pass_:
            firsts = [builder.add(builder.mul(pass_.index, int64(16)), int64(4 * j))
                      for j in range(4)]
            starts = [builder.select(builder.icmp_signed("<", first, last), first, last)
                      for first in firsts]
            row = row_start(int64(0))
            for j in range(4):
                values = load(row, starts[j])
                builder.store(values, lows_slots[j])
                builder.store(values, highs_slots[j])
            with cgutils.for_range(builder, count, start=int64(1)) as point:
                row = row_start(point.index)
                for j in range(4):
                    values = load(row, starts[j])
                    low, high = builder.load(lows_slots[j]), builder.load(highs_slots[j])
                    builder.store(builder.select(builder.fcmp_ordered("<", values, low),
                                                 values, low), lows_slots[j])
                    builder.store(builder.select(builder.fcmp_ordered(">", values, high),
                                                 values, high), highs_slots[j])
            for j in range(4):
                low, high = builder.load(lows_slots[j]), builder.load(highs_slots[j])
                spread = builder.fsub(high, low)
                store(low, lows_array, starts[j])
                store(high, highs_array, starts[j])
                store(spread, widths_array, starts[j])
                # lanes at or past the register's own first direction are new to the rate
                direction = builder.add(splat(starts[j]), ir.Constant(lanes, [0, 1, 2, 3]))
                new = builder.icmp_signed(">=", direction, splat(firsts[j]))
                builder.store(builder.fadd(builder.load(rate_slot),
                                           builder.select(new, spread, zero)), rate_slot)
        rate = builder.load(rate_slot)
        parts = [builder.extract_element(rate, int64(i)) for i in range(4)]
        return builder.fadd(builder.fadd(parts[0], parts[1]), builder.fadd(parts[2], parts[3]))
    return (types.float64(rows, orders, types.int64, types.int64, types.int64, lows, highs,
                          widths), codegen)


@njit(cache=True, nogil=True, inline="always")
def _extents(rows, orders, buffer, start, end, lows, highs, widths):
    """The extent of the points ``orders[buffer, start:end]`` along every direction.

    Writes the lowest and highest of ``rows[:, k]`` over them to ``lows[k]``
    and ``highs[k]``, and their difference to ``widths[k]``; returns the sum
    of the widths, the cell's rate.
    """
    m = rows.shape[1]
    if m >= 4:
        return _vector_extents(rows, orders, buffer, start, end, lows, highs, widths)
    rate = 0.0
    for k in range(m):
        lowest = highest = rows[orders[buffer, start], k]
        for position in range(start + 1, end):
            value = rows[orders[buffer, position], k]
            lowest = min(lowest, value)
            highest = max(highest, value)
        lows[k], highs[k], widths[k] = lowest, highest, highest - lowest
        rate += widths[k]
    return rate


@njit(cache=True, nogil=True, inline="always")
def _route_to_itself(routing, node):
    """Make ``node``'s routing record a leaf's: it sends every point back to ``node``."""
    record = routing[node]
    record.offset = np.inf
    record.left = node
    record.direction = 0


@njit(cache=True, nogil=True, inline="always")
def _make_leaf(routing, split_time, node):
    """Mark ``node`` a leaf: it routes to itself and is never cut."""
    _route_to_itself(routing, node)
    split_time[node] = np.inf


@njit(cache=True, nogil=True)
def routing_records(direction, offset, left, exponent):
    """Routing records of a tree's nodes, offsets multiplied by ``2**exponent``."""
    records = np.empty(direction.size, ROUTING_RECORD)
    for node in range(direction.size):
        if direction[node] < 0:
            _route_to_itself(records, node)
        else:
            records[node].offset = np.ldexp(offset[node], exponent)
            records[node].left = left[node]
            records[node].direction = direction[node]
    return records


# what stopped _grow_cells: the subtree is done, or an array needs more room
_DONE, _LOG_FULL, _SET_ASIDE_FULL = 0, 1, 2


@njit(cache=True, nogil=True)
def _grow_subtree(rows, columns, orders, point_ids, root, root_birth, box, lifetime,
                  set_aside_at, exponent, routing, parent, split_time, leaf_of_point,
                  n_nodes, generator, offset, first_position, point_order):
    """Grow the subtree of cell ``root``, which holds all of ``orders[0]``, depth first.

    ``rows[i]`` and ``columns[:, i]`` are the lifted values of training
    point ``point_ids[i]``; ``box`` holds the root's box on entry. Cells of at
    most ``set_aside_at`` points (other than the root) are not grown but
    returned as rows ``(node, start, end, row of orders, birth)``.
    Cuts are recorded with their offsets multiplied by ``2**exponent``.
    Random numbers come from ``generator``. Position ``i`` of ``orders`` is
    position ``offset + i`` of the tree's layout (if recorded, see
    :func:`grow_from_data`). Returns the new node count, those rows and
    their number.
    """
    m = rows.shape[1]
    size = orders.shape[1] + 1
    stack_index = np.empty((size, 6), np.int64)
    stack_index[0] = (root, 0, orders.shape[1], 0, -1, 0)
    stack_value = np.empty((size, 3))
    stack_value[0] = (root_birth, 0.0, 0.0)
    log_position = np.empty(16 * m + 16, np.int32)
    log_value = np.empty(16 * m + 16)
    set_aside = np.empty((16, 5))
    state = np.array([1, 0, n_nodes, 0])  # stack depth, log length, nodes, cells set aside
    # growing an array inside the loop would cost reference counting on every step,
    # so the loop stops when one is full and resumes after it has grown
    while True:
        status = _grow_cells(rows, columns, orders, point_ids, root, box, lifetime,
                             set_aside_at, exponent, routing, parent, split_time,
                             leaf_of_point, stack_index, stack_value, log_position,
                             log_value, set_aside, state, generator, offset, first_position,
                             point_order)
        if status == _DONE:
            return state[2], set_aside, state[3]
        if status == _LOG_FULL:
            log_position = _doubled(log_position)
            log_value = _doubled(log_value)
        else:
            set_aside = _doubled(set_aside)


@njit(cache=True, nogil=True)
def _grow_cells(rows, columns, orders, point_ids, root, box, lifetime, set_aside_at,
                exponent, routing, parent, split_time, leaf_of_point, stack_index,
                stack_value, log_position, log_value, set_aside, state, generator, offset,
                first_position, point_order):
    """The depth-first loop of :func:`_grow_subtree`; returns a status, saves ``state``.

    A cell is a range of positions in one row of ``orders``; its split writes
    the children's ranges into the other row, so nothing is copied back. A
    pending cell is ``stack_index`` = (node, start, end, log mark, tightened
    direction, row of orders) and ``stack_value`` = (birth, low, high): the
    side along which its box is tighter than its parent's final box.
    """
    m = rows.shape[1]
    depth, log_length, n_nodes, n_set_aside = state[0], state[1], state[2], state[3]
    recording = point_order.size > 0
    widths = np.empty(m)
    lows = np.empty(m)
    highs = np.empty(m)
    status = _DONE
    while depth > 0:
        depth -= 1
        node, start, end = stack_index[depth, 0], stack_index[depth, 1], stack_index[depth, 2]
        mark, tightened, buffer = (stack_index[depth, 3], stack_index[depth, 4],
                                   stack_index[depth, 5])
        clock, tight_low, tight_high = (stack_value[depth, 0], stack_value[depth, 1],
                                        stack_value[depth, 2])
        other = 1 - buffer
        count = end - start
        exact = count <= EXACT_EXTENT_BELOW
        if not exact and count <= set_aside_at and node != root:
            # set aside with no box: its copy measures the exact box of its points
            if n_set_aside == set_aside.shape[0]:
                status = _SET_ASIDE_FULL
                depth += 1
                break
            # (element by element: assigning a tuple allocates in compiled code)
            set_aside[n_set_aside, 0] = node
            set_aside[n_set_aside, 1] = start
            set_aside[n_set_aside, 2] = end
            set_aside[n_set_aside, 3] = buffer
            set_aside[n_set_aside, 4] = clock
            n_set_aside += 1
            continue
        if not exact:
            while log_length > mark:  # back to the parent's final box
                log_length -= 1
                box[log_position[log_length]] = log_value[log_length]
            if log_length + 2 * m + 2 > log_position.size:
                status = _LOG_FULL
                depth += 1
                break
            if tightened >= 0:
                log_length = _set_logged(box, tightened, tight_low, log_position, log_value,
                                         log_length)
                log_length = _set_logged(box, m + tightened, tight_high, log_position,
                                         log_value, log_length)
            # the box's widths, which the misses below may tighten; the rate is summed
            # once per cell, and a miss changes one term
            rate = 0.0
            for k in range(m):
                lows[k] = box[k]
                widths[k] = box[m + k] - box[k]
                rate += widths[k]
        else:
            # a few points: their exact widths cost less than waiting for misses
            rate = _extents(rows, orders, buffer, start, end, lows, highs, widths)

        was_cut = False
        while True:
            if not rate > 0.0:
                break  # all points of the cell coincide
            # an Exp(1) waiting time by numpy's ziggurat method (Marsaglia & Tsang 2000),
            # as numba compiles it: a table lookup for most draws, where -log(1 - U)
            # would take a logarithm every time
            clock += generator.standard_exponential() / rate
            if clock > lifetime:
                break
            # one uniform point on the widths laid end to end picks the direction (∝ width)
            # and, by where it falls inside that width, the uniform offset
            target = generator.random() * rate
            chosen, total = -1, 0.0
            for k in range(m):
                total += widths[k]  # (a zero width leaves the total: it never ends the scan)
                if target < total:
                    chosen = k
                    break
            if chosen < 0:  # rounding left the target at the very end: the last positive width
                for k in range(m - 1, -1, -1):
                    if widths[k] > 0.0:
                        chosen = k
                        break
                if chosen < 0:
                    break  # rounding left a rate above zero when every width had shrunk to it
            low, width = lows[chosen], widths[chosen]
            cut = low + min(max(target - (total - width), 0.0), width)

            n_left, lowest, highest = _partition(columns, chosen, orders, buffer, start, end,
                                                 cut)
            if n_left == 0 or n_left == count:
                if not exact:
                    # the cut misses the points: tighten this direction, the clock runs on
                    log_length = _set_logged(box, chosen, lowest, log_position, log_value,
                                             log_length)
                    log_length = _set_logged(box, m + chosen, highest, log_position,
                                             log_value, log_length)
                    rate += (highest - lowest) - width
                    lows[chosen], widths[chosen] = lowest, highest - lowest
                continue  # (an exact cell misses only when rounding puts the cut on its end)

            record = routing[node]
            record.offset = np.ldexp(cut, exponent)
            record.left = n_nodes
            record.direction = chosen
            split_time[node] = clock
            was_cut = True
            # the right child waits below the left one, which is grown next
            for side in range(2):
                child = n_nodes + 1 - side
                first = start + n_left if side == 0 else start
                stop = end if side == 0 else start + n_left
                parent[child] = node
                _make_leaf(routing, split_time, child)
                if recording:
                    first_position[child] = offset + first
                if stop - first == 1:  # one point: a leaf at once
                    point = point_ids[orders[other, first]]
                    leaf_of_point[point] = child
                    if recording:
                        point_order[offset + first] = point
                    continue
                stack_index[depth, 0] = child
                stack_index[depth, 1] = first
                stack_index[depth, 2] = stop
                stack_index[depth, 3] = log_length
                stack_index[depth, 4] = chosen
                stack_index[depth, 5] = other
                stack_value[depth, 0] = clock
                # the cut bounds each child along the column (a box need not be tight)
                stack_value[depth, 1] = cut if side == 0 else lowest
                stack_value[depth, 2] = highest if side == 0 else cut
                depth += 1
            n_nodes += 2
            break
        if not was_cut:
            for position in range(start, end):
                point = point_ids[orders[buffer, position]]
                leaf_of_point[point] = node
                if recording:
                    point_order[offset + position] = point
    state[0], state[1], state[2], state[3] = depth, log_length, n_nodes, n_set_aside
    return status


@njit(cache=True, nogil=True)
def _doubled(array):
    """A copy of ``array`` with twice the rows, the first half filled."""
    grown = np.empty((2 * array.shape[0],) + array.shape[1:], array.dtype)
    grown[: array.shape[0]] = array
    return grown


@njit(cache=True, nogil=True)
def node_values(parent, leaf_of_point, targets, weights, counts, values, totals):
    """Training points and weighted mean target of every node.

    Computed from the leaf each point ended in; ``weights`` are the sample
    weights (all positive; ones when none were given, which leaves every
    mean exactly as unweighted). An empty node takes the value of its
    nearest non-empty ancestor. Writes ``counts`` (n_nodes,) and ``values``
    (n_nodes, n_outputs); the sums become the means in place, so the only
    scratch array is the weight totals, ``totals`` (at least n_nodes long,
    reused from tree to tree).
    """
    n_nodes = parent.size
    n_outputs = targets.shape[1]
    counts[:] = 0
    values[:] = 0.0
    totals[:n_nodes] = 0.0
    for i in range(leaf_of_point.size):
        leaf = leaf_of_point[i]
        counts[leaf] += 1
        totals[leaf] += weights[i]
        for k in range(n_outputs):
            values[leaf, k] += weights[i] * targets[i, k]
    for node in range(n_nodes - 1, 0, -1):  # children have larger ids than their parent
        above = parent[node]
        counts[above] += counts[node]
        totals[above] += totals[node]
        for k in range(n_outputs):
            values[above, k] += values[node, k]
    for node in range(n_nodes):  # parents first: an empty node copies a finished mean
        if totals[node] > 0:
            for k in range(n_outputs):
                values[node, k] /= totals[node]
        elif node > 0:
            for k in range(n_outputs):
                values[node, k] = values[parent[node], k]


# points routed at once: their independent loads overlap in the memory system
_SLOTS = 8


@njit(cache=True, nogil=True)
def apply_tree(rows, routing, leaves):
    """Leaf id of every point in one tree, into ``leaves`` (n,), ``_SLOTS`` points at a time.

    A leaf routes to itself, so a point has arrived when its step leaves it
    in place; its slot then takes the next point, and no slot idles while
    the deepest of a fixed group descends (in fully grown trees the deepest
    leaf of a group of eight lies about 1.3 times deeper than the average).
    """
    n = rows.shape[0]
    point = np.empty(_SLOTS, np.int64)
    node = np.zeros(_SLOTS, np.uint64)
    for g in range(_SLOTS):
        point[g] = g if g < n else -1
    waiting = min(_SLOTS, n)  # the next point to start
    active = waiting
    while active > 0:
        for g in range(_SLOTS):
            at = point[g]
            if at < 0:
                continue
            current = node[g]
            record = routing[current]
            following = np.uint64(record.left) + np.uint64(
                rows[np.uint64(at), np.uint64(record.direction)] > record.offset)
            if following != current:
                node[g] = following
                continue
            leaves[at] = current
            node[g] = 0
            if waiting < n:
                point[g] = waiting
                waiting += 1
            else:
                point[g] = -1
                active -= 1


@njit(cache=True, nogil=True)
def add_tree_values(rows, routing, value, total):
    """Add one tree's leaf value for every point to ``total`` (n, n_outputs)."""
    leaves = np.empty(rows.shape[0], np.int64)
    apply_tree(rows, routing, leaves)
    for i in range(rows.shape[0]):  # (adding as the points arrive measured slower)
        for k in range(value.shape[1]):
            total[i, k] += value[leaves[i], k]


@njit(cache=True, nogil=True)
def subtree_layout(routing, counts, leaf_of_point, first_position, point_order):
    """Lay out a tree's training points so that every subtree is a run of positions.

    Writes ``first_position`` (n_nodes,), the first position of each node's
    points (a left child's run comes first), and ``point_order`` (n,), the
    point at each position. Growth on the data writes the same layout as it
    goes (:func:`grow_from_data`); this builds it from the leaves, for trees
    filled after growth.
    """
    n_nodes = counts.size
    start = np.zeros(n_nodes + 2, np.int64)
    for node in range(n_nodes):  # parents first: children split the parent's run
        child = routing[node].left
        into = child if child != node else n_nodes  # a leaf writes past the end: no branch
        start[into] = start[node]
        start[into + 1] = start[node] + counts[child]
    first_position[:] = start[:n_nodes]
    for point in range(leaf_of_point.size):  # start becomes each leaf's next free position
        leaf = leaf_of_point[point]
        point_order[start[leaf]] = point
        start[leaf] += 1


@njit(cache=True, nogil=True)
def add_leave_one_out(routing, parent, split_time, counts, value, first_position,
                      point_order, targets, weights, weights_equal, grid, total):
    """Add one tree's leave-one-out predictions of its training points at every lifetime.

    Parameters
    ----------
    routing, parent, split_time, counts, value : node arrays of one tree
    first_position, point_order : ndarray
        The tree's subtree layout (:func:`subtree_layout`), fully grown.
    targets : ndarray of shape (n, n_outputs)
    weights : ndarray of shape (n,)
        Positive sample weights (ones when none were given).
    weights_equal : bool
        Whether all weights are equal (the caller checks once for every tree).
    grid : ndarray, ascending
        Lifetimes, in the units of ``split_time``.
    total : ndarray of shape (n_outputs, n_grid, n)
        Accumulates the predictions as differences along the lifetimes: its
        cumulative sum over axis 1 is the sum of the predictions.

    Notes
    -----
    A node is a leaf of the tree pruned at lifetime t exactly when
    ``birth <= t < split`` (a Mondrian tree at a smaller lifetime is the
    same tree pruned; Lakshminarayanan, Roy & Teh 2014), so every node
    serves a run of grid lifetimes for all the points of its subtree. The
    points are laid out so that every subtree is a contiguous run, and each
    (point, lifetime) pair is then served exactly once; a point's runs follow
    one another along the grid, so each costs one entry of the difference
    array (the change from the run before), not one per lifetime. A point's
    prediction in a cell leaves the point out with its whole weight,
    ``(sum - w_i y_i) / (total - w_i)`` over weighted sums and totals. A cell
    holding only the point predicts what its parent does (all its descendants
    hold the point alone too), so the parent's run for that point extends to the
    end of the grid and cells of fewer than two points are skipped.
    """
    n_nodes = parent.size
    n_grid = grid.size
    n_outputs = targets.shape[1]
    shared = np.empty(n_nodes, np.int64)  # the nodes of two points or more, in order
    n_shared = 0
    for node in range(n_nodes):
        shared[n_shared] = node
        n_shared += counts[node] > 1
    # the targets (and weights) in subtree order, which the loop below reads in sequence
    members = point_order
    member_targets = np.empty((n_outputs, members.size))
    member_weights = np.empty(members.size if not weights_equal else 0)
    for position in range(members.size):
        point = members[position]
        for k in range(n_outputs):
            member_targets[k, position] = targets[point, k]
    common_weight = weights[0]
    totals = np.empty(0)
    if not weights_equal:
        totals = np.zeros(n_nodes)
        for position in range(members.size):
            member_weights[position] = weights[members[position]]
        for node in range(n_nodes):  # a leaf's points are a run of positions
            if routing[node].left == node:
                for position in range(first_position[node], first_position[node] + counts[node]):
                    totals[node] += member_weights[position]
        for node in range(n_nodes - 1, 0, -1):  # children have larger ids than their parent
            totals[parent[node]] += totals[node]
    # node serves grid[first:stop]; its first is where its parent's run stopped. Along the
    # lifetimes a point's prediction changes only where a run starts, from the prediction
    # of the nearest ancestor that served a run (``before``) to the new cell's: one entry
    stops = np.empty(n_nodes, np.int64)
    before = np.empty(n_nodes, np.int64)
    before[0] = -1
    # (nodes of fewer points are left out: their children hold one point or none and
    # need neither a stop nor a before; skipping them in the loop mispredicted branches)
    for item in range(n_shared):
        node = shared[item]
        first = 0 if node == 0 else stops[parent[node]]
        child = routing[node].left
        stop = n_grid
        if counts[node] == 2 and child != node and counts[child] == 1:
            # two points, each alone in a child, start this node's run at first whether
            # or not it is empty for others, and the children need no stop and no before
            stop = first
        elif child != node:
            stop = first
            while stop < n_grid and grid[stop] < split_time[node]:
                stop += 1
            stops[node] = stop
            before[child] = before[child + 1] = node if first < stop else before[node]
        # points alone in a child keep this node's prediction to the end of the grid, so
        # they start its run even when it is empty for the others
        alone_low = child != node and counts[child] == 1
        alone_high = child != node and counts[child + 1] == 1
        if first >= stop and not (alone_low or alone_high):
            continue
        previous = before[node]
        weight_total, reciprocal = _cell_weight(node, counts, totals, weights_equal,
                                                common_weight)
        previous_total = previous_reciprocal = 0.0
        if previous >= 0:
            previous_total, previous_reciprocal = _cell_weight(previous, counts, totals,
                                                               weights_equal, common_weight)
        lowest = first_position[node]
        highest = lowest + counts[node]
        if first >= stop:  # only the points alone in a child
            lowest = lowest if alone_low else highest - 1
            highest = highest if alone_high else lowest + 1
        for k in range(n_outputs):
            numerator = value[node, k] * weight_total
            previous_numerator = value[previous, k] * previous_total if previous >= 0 else 0.0
            for position in range(lowest, highest):
                change = _left_out(numerator, weight_total, reciprocal, position, k,
                                   member_targets, member_weights, weights_equal,
                                   common_weight)
                if previous >= 0:  # (the same every turn: the compiler hoists it)
                    change -= _left_out(previous_numerator, previous_total,
                                        previous_reciprocal, position, k, member_targets,
                                        member_weights, weights_equal, common_weight)
                total[k, first, members[position]] += change


@njit(cache=True, nogil=True, inline="always")
def _cell_weight(node, counts, totals, weights_equal, common_weight):
    """A cell's weight total and, with equal weights, the reciprocal of that total less
    one point's weight (0 otherwise: each point then has its own)."""
    if weights_equal:
        weight_total = counts[node] * common_weight
        return weight_total, 1.0 / (weight_total - common_weight)
    return totals[node], 0.0


@njit(cache=True, nogil=True, inline="always")
def _left_out(numerator, weight_total, reciprocal, position, k, member_targets,
              member_weights, weights_equal, common_weight):
    """A cell's prediction for the point at ``position`` with that point left out."""
    if weights_equal:
        return (numerator - common_weight * member_targets[k, position]) * reciprocal
    weight = member_weights[position]
    return (numerator - weight * member_targets[k, position]) * (1.0 / (weight_total - weight))


@njit(cache=True, nogil=True)
def squared_errors_over_lifetimes(differences, targets, weights, n_trees):
    """Weighted sums of squared errors of the forest's prediction at every lifetime.

    ``differences`` (outputs, grid, n) are the trees' summed predictions as
    differences along the lifetimes (:func:`add_leave_one_out`); their
    running sum over the grid, divided by ``n_trees``, is the prediction.
    Returns ``sum_i weights[i] * sum_k (prediction - targets[i, k])**2`` per
    lifetime, in one pass that reads each row of differences once and writes
    nothing but a running row.
    """
    n_outputs, n_grid, n = differences.shape
    errors = np.zeros(n_grid)
    running = np.empty(n)
    for k in range(n_outputs):
        running[:] = 0.0
        for g in range(n_grid):
            error = 0.0
            for i in range(n):
                running[i] += differences[k, g, i]
                residual = running[i] / n_trees - targets[i, k]
                error += weights[i] * (residual * residual)
            errors[g] += error
    return errors


@njit(cache=True, nogil=True)
def pruned_size(parent, split_time, lifetime):
    """Number of nodes in the tree at a smaller lifetime: those born by then."""
    kept = 1
    for node in range(1, parent.size):
        kept += split_time[parent[node]] <= lifetime
    return kept


@njit(cache=True, nogil=True)
def prune_tree(routing, parent, split_time, counts, value, lifetime, pruned, pruned_parent,
               pruned_split, pruned_counts, pruned_value):
    """The tree at a smaller lifetime: cells born later dropped, later cuts made leaves.

    Writes the pruned tree's nodes to the ``pruned*`` arrays (at least
    :func:`pruned_size` long) in one pass, and returns their number. A node is
    kept when its parent was kept as a cut cell; kept nodes keep their order,
    so a cell's left child is the first node kept after it whose parent it
    is. The ``pruned*`` arrays may share memory with the tree's, starting at
    or before them: node ``i`` is read in full before anything is written at
    its new id, which is at most ``i``, and a new id is written only once.
    """
    n_outputs = value.shape[1]
    new_id = np.empty(parent.size, np.int64)
    kept = 0
    for node in range(parent.size):
        above = -1
        if node > 0:
            above = new_id[parent[node]]
            if above < 0 or not pruned_split[above] <= lifetime:  # born after the lifetime
                new_id[node] = -1
                continue
        target = kept
        kept += 1
        new_id[node] = target
        # field by field (whole-record and row copies cost more), all read before written
        left, offset, direction = routing[node].left, routing[node].offset, routing[node].direction
        split, count = split_time[node], counts[node]
        if left != node and split <= lifetime:
            record = pruned[target]
            record.offset = offset
            record.left = -1  # until its left child, the next node kept below it, arrives
            record.direction = direction
            pruned_split[target] = split
        else:
            _make_leaf(pruned, pruned_split, target)
        if above >= 0 and pruned[above].left < 0:
            pruned[above].left = target
        pruned_parent[target] = above
        pruned_counts[target] = count
        for k in range(n_outputs):
            pruned_value[target, k] = value[node, k]
    return kept


@njit(cache=True, nogil=True)
def prune_packed(routing, parent, split_time, counts, value, sizes, lifetime):
    """Prune trees packed one after another in shared arrays, in place, and pack the
    pruned trees to the front; returns their sizes.

    Tree ``k`` occupies ``sizes[k]`` entries after the trees before it. Its
    pruned nodes are written at or before the entries they are read from (a
    pruned tree starts no later than its grown one, and ids only shrink), and
    every entry is read before anything is written over it, so no second copy
    of the trees and no fresh memory is needed.
    """
    kept_sizes = np.empty(sizes.size, np.int64)
    read = written = 0
    for k in range(sizes.size):
        grown = slice(read, read + sizes[k])
        into = slice(written, read + sizes[k])
        kept_sizes[k] = prune_tree(routing[grown], parent[grown], split_time[grown],
                                   counts[grown], value[grown], lifetime, routing[into],
                                   parent[into], split_time[into], counts[into], value[into])
        read += sizes[k]
        written += kept_sizes[k]
    return kept_sizes


@njit(cache=True, nogil=True)
def move_down(words, source, target, count):
    """Copy ``count`` words of ``words`` from ``source`` to ``target <= source``.

    Forward, word after word as far as the result goes, so an overlap is safe.
    """
    for i in range(count):
        words[target + i] = words[source + i]


@njit(cache=True, nogil=True)
def node_depths(parent):
    """Depth of every node (parents come before their children)."""
    depth = np.zeros(parent.size, np.int32)
    for node in range(1, parent.size):
        depth[node] = depth[parent[node]] + 1
    return depth
