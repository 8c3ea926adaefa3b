"""Compiled zero-crossing tracer: marching squares, hysteresis and ownership in one pass.

:func:`trace_compiled` returns the pieces and fragments
:func:`lineament.crossings.trace_level_set_reference` returns (every zero
crossing of the window traced, strong runs kept), computed by numba-compiled
code instead of ``skimage.measure.find_contours`` plus a Python loop over
contours.  Only the kept pieces and the fragments reach Python.

Only vertices that can be part of a kept run are assembled.  In real use
``low`` is a multiple of the noise level and most crossing vertices are
weaker (about three in four on a LoG response of terrain with the default
thresholds), so :func:`_strong_runs` samples the strength of every crossed
pixel edge as marching squares reaches it, gives a point id only to
vertices that pass (nearest pixel in the mask, strength >= ``low``), and
links only segments between two of those.  The whole level set is still
assembled by :func:`level_contours` (``find_contours``' output) and when a
passing vertex lies on a pixel centre (below).

How the result is kept identical to the reference
-------------------------------------------------
* **Vertices.**  Marching squares (Lorensen and Cline 1987) over every cell
  of the window at level 0, with the vertex formula, the ``>`` test, the
  case table and the saddle rule (low values fully connected) of
  ``find_contours`` with its defaults.  Vertex coordinates are bit-identical.
* **Runs without whole contours.**  ``find_contours`` joins the cell
  segments, in raster order, through dictionaries keyed by vertex
  coordinates; each segment ends up in one contour, between two consecutive
  vertices.  A vertex that is not on a pixel centre lies on one pixel edge
  and starts and ends at most one segment (a crossed edge starts a segment
  in exactly one of its two cells).  So among such vertices that pass, the
  segments between two of them form chains and cycles, and those are the
  hysteresis runs of the reference: a run is a maximal stretch of passing
  vertices along a contour, with the contour's orientation.  A run that
  wraps around the start of a closed contour in the reference is an open
  chain here, with the same vertices in the same order.  A cycle is a
  closed contour that passes everywhere (a ring kept whole); all its
  segments are linked, so it starts where ``find_contours`` starts it, at
  the end of its last segment in raster order (:func:`_walk_chains`),
  which decides where the fragments of a ring cut by the core begin.
  Vertices on pixel centres (exact zeros, or rounding onto a centre) may
  join several segments; when one of them passes, the whole level set is
  assembled instead, by replaying the dictionary assembly with integer
  point ids and linked lists (:func:`_contours`), and the rule is applied
  to every contour as in the reference.  Vertices on centres that do not
  pass take no part in any run and do not stop the pruned assembly.  Cells
  with a NaN corner are skipped, as ``find_contours`` skips them; a vertex
  with NaN coordinates (next to a NaN or an infinity) never passes.
* **Whole level set.**  :func:`level_contours` returns ``find_contours``'
  contours: without vertices on pixel centres they are the chains and
  cycles of the successor map of all segments, ordered by their first
  segment (:func:`_contours_chains`), otherwise the replayed assembly.
* **Strength and rule.**  Vertex strength is Keys' 6-point cubic convolution with
  the tap and summation order of :func:`~lineament.crossings.sample_cubic`,
  clipped at 0 and rounded to float32.  Hysteresis runs, core ownership of
  segment midpoints, :func:`~lineament.crossings.keep_run` (NumPy's
  pairwise summation reproduced for the float32 mean and the float64 path
  length) and :func:`~lineament.crossings.canonical_ring` follow
  :func:`lineament.crossings.trace_level_set_reference` step by step on
  each run (:func:`_select`), so every piece and fragment comes out with
  the same vertices in the same direction, the same strengths and the same
  open flags.  The comparison of float32 strengths with ``low`` follows
  NumPy's rules for Python and NumPy scalars (float32 for a Python
  ``float``, float64 for a NumPy ``float64``).
* **Order.**  The reference lists pieces and fragments contour by contour;
  here runs are found without their contours, so the lists come in the
  order the runs are found (open runs by the point id of their first
  vertex, which follows the rows, then rings).  Callers do not depend on
  the order: :mod:`lineament.pipeline` sorts pieces by their first vertex
  and :func:`~lineament.crossings.stitch_fragments` joins fragments by
  their end vertices.

Strengths are sampled with 6 taps instead of 36: a vertex lies on a pixel
edge, where the weights across the edge are exactly (0, 0, 1, 0, 0, 0)
(:func:`_sample_on_edge`), read without clamping away from the window's
sides.  All 36 taps are used where a row the taps may come from has a NaN
or an infinity (``0 * inf`` is not 0); rows are checked just ahead of the
row pass.  The sustained rule computes the path length only for runs whose
mean strength passes and that are long enough to reach
``sustained_length_px``.

Marching squares works a row of pixels at a time: sign bits, crossed edges
compacted into lists, then for crossed edges only the vertex coordinates
(one division each) and strengths, written without branches on whether
the vertex passes, then the links of the passing vertices.

Point and contour ids are int32, so a window holds at most 2**28 pixels.
Everything runs in one thread; numba caches the machine code
(``cache=True``), so only the first call after installation compiles.

References
----------
Lorensen, W. E. and Cline, H. E. (1987). Marching cubes: a high resolution
3D surface construction algorithm. SIGGRAPH '87, 163-169.
doi:10.1145/37401.37422
Canny, J. (1986). A computational approach to edge detection. IEEE TPAMI
8(6), 679-698. doi:10.1109/TPAMI.1986.4767851
Keys, R. (1981). Cubic convolution interpolation for digital image
processing. IEEE TASSP 29(6), 1153-1160. doi:10.1109/TASSP.1981.1163711
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .crossings import Core, Fragment

__all__ = ["trace_compiled", "level_contours"]

_JIT = dict(cache=True, nogil=True, fastmath=False)
#: Largest window: point ids (at most two per pixel) and list nodes (two per point) fit int32.
_MAX_PIXELS = 2**28


# --------------------------------------------------------------------------- marching squares + assembly


@numba.njit(**_JIT)
def _fraction(a, b):
    # vertex position between values a and b at level 0 (find_contours' formula)
    if b == a:
        return 0.0
    return (0.0 - a) / (b - a)


@numba.njit(**_JIT)
def _count_crossed_edges(field):
    h, w = field.shape
    n = 0
    for r in range(h):
        for c in range(w):
            a = field[r, c] > 0.0
            if c + 1 < w and a != (field[r, c + 1] > 0.0):
                n += 1
            if r + 1 < h and a != (field[r + 1, c] > 0.0):
                n += 1
    return n


@numba.njit(**_JIT)
def _count_crossed_edges_nan(field):
    """:func:`_count_crossed_edges`, and whether ``field`` has a NaN."""
    h, w = field.shape
    n = 0
    nan = False
    for r in range(h):
        for c in range(w):
            v = field[r, c]
            a = v > 0.0
            nan |= v != v
            if c + 1 < w and a != (field[r, c + 1] > 0.0):
                n += 1
            if r + 1 < h and a != (field[r + 1, c] > 0.0):
                n += 1
    return n, nan


@numba.njit(**_JIT)
def _point(r, c, slots, k, pix_top, pix_bot, r0, pt_r, pt_c, npt):
    """Id of the vertex at (r, c): one per pixel edge, or per pixel centre when both are integers.

    Slots are not cleared between bands of cells: an id is current when its
    point has the same row coordinate (older bands lie on other rows).
    """
    if r == math.floor(r) and c == math.floor(c):
        row = pix_top if int(r) == r0 else pix_bot
        ci = int(c)
        p = row[ci]
        if p < 0 or pt_r[p] != r:
            p = npt
            row[ci] = p
            pt_r[p] = r
            pt_c[p] = c
            npt += 1
        return p, npt
    p = slots[k]
    if p < 0 or pt_r[p] != r:
        p = npt
        slots[k] = p
        pt_r[p] = r
        pt_c[p] = c
        npt += 1
    return p, npt


@numba.njit(**_JIT)
def _add_segment(fp, tp, starts, ends, node_pid, node_next, c_first, c_last, c_len, c_alive, nnode, ncont):
    """One step of find_contours' contour assembly (dict semantics on point ids)."""
    if fp == tp:  # degenerate segment
        return nnode, ncont
    tail = starts[tp]
    if tail >= 0:
        starts[tp] = -1
    head = ends[fp]
    if head >= 0:
        ends[fp] = -1
    if tail >= 0 and head >= 0:
        if tail == head:  # close the contour
            node_pid[nnode] = tp
            node_next[nnode] = -1
            node_next[c_last[head]] = nnode
            c_last[head] = nnode
            c_len[head] += 1
            nnode += 1
        elif tail > head:  # append tail to head
            node_next[c_last[head]] = c_first[tail]
            c_last[head] = c_last[tail]
            c_len[head] += c_len[tail]
            c_alive[tail] = False
            starts[node_pid[c_first[head]]] = head
            ends[node_pid[c_last[head]]] = head
        else:  # prepend head to tail
            node_next[c_last[head]] = c_first[tail]
            head_first = node_pid[c_first[head]]
            c_first[tail] = c_first[head]
            c_len[tail] += c_len[head]
            c_alive[head] = False
            starts[head_first] = -1
            starts[node_pid[c_first[tail]]] = tail
            ends[node_pid[c_last[tail]]] = tail
    elif tail < 0 and head < 0:  # new contour
        k = ncont
        node_pid[nnode] = fp
        node_next[nnode] = nnode + 1
        node_pid[nnode + 1] = tp
        node_next[nnode + 1] = -1
        c_first[k] = nnode
        c_last[k] = nnode + 1
        c_len[k] = 2
        c_alive[k] = True
        starts[fp] = k
        ends[tp] = k
        nnode += 2
        ncont += 1
    elif head < 0:  # prepend from-point to tail
        node_pid[nnode] = fp
        node_next[nnode] = c_first[tail]
        c_first[tail] = nnode
        c_len[tail] += 1
        starts[fp] = tail
        nnode += 1
    else:  # append to-point to head
        node_pid[nnode] = tp
        node_next[nnode] = -1
        node_next[c_last[head]] = nnode
        c_last[head] = nnode
        c_len[head] += 1
        ends[tp] = head
        nnode += 1
    return nnode, ncont


@numba.njit(**_JIT)
def _grow(a, need):
    """``a`` with room for ``need`` entries (doubled, contents kept, new entries zero / False)."""
    if need <= a.size:
        return a
    b = np.zeros(max(need, 2 * a.size), a.dtype)
    for i in range(a.size):
        b[i] = a[i]
    return b


@numba.njit(**_JIT)
def _contours(field):
    """Zero contours of ``field`` as find_contours(field, 0.0) gives them.

    Returns point coordinates ``pt_r, pt_c`` (float64, shape (p,)), the
    point ids of all contours one after another ``verts`` (int64) and the
    contour bounds ``bounds`` (shape (k + 1,)).
    """
    h, w = field.shape
    cap = _count_crossed_edges(field) + 2
    pt_r = np.empty(cap, np.float64)
    pt_c = np.empty(cap, np.float64)
    starts = np.full(cap, -1, np.int32)
    ends = np.full(cap, -1, np.int32)
    node_pid = np.empty(2 * cap, np.int32)
    node_next = np.empty(2 * cap, np.int32)
    ccap = 1024
    c_first = np.empty(ccap, np.int32)
    c_last = np.empty(ccap, np.int32)
    c_len = np.empty(ccap, np.int32)
    c_alive = np.zeros(ccap, np.bool_)
    npt = 0
    nnode = 0
    ncont = 0
    # point ids of the pixel edges and centres of the current band of cells
    h_top = np.full(w, -1, np.int32)  # horizontal edges on row r0
    h_bot = np.full(w, -1, np.int32)  # horizontal edges on row r0 + 1
    v_row = np.full(w, -1, np.int32)  # vertical edges between rows r0 and r0 + 1
    pix_top = np.full(w, -1, np.int32)
    pix_bot = np.full(w, -1, np.int32)
    for r0 in range(h - 1):
        r1 = r0 + 1
        if r0 > 0:
            h_top, h_bot = h_bot, h_top
            pix_top, pix_bot = pix_bot, pix_top
        fr = r0 * 1.0
        for c0 in range(w - 1):
            c1 = c0 + 1
            ul = np.float64(field[r0, c0])
            ur = np.float64(field[r0, c1])
            ll = np.float64(field[r1, c0])
            lr = np.float64(field[r1, c1])
            case = 0
            if ul > 0.0:
                case += 1
            if ur > 0.0:
                case += 2
            if ll > 0.0:
                case += 4
            if lr > 0.0:
                case += 8
            if case == 0 or case == 15:
                # NaN compares false, so an all-NaN or partly NaN cell may land here: skipped either way
                continue
            if math.isnan(ul) or math.isnan(ur) or math.isnan(ll) or math.isnan(lr):
                continue
            if ncont + 2 > ccap:
                ccap *= 2
                c_first = _grow(c_first, ccap)
                c_last = _grow(c_last, ccap)
                c_len = _grow(c_len, ccap)
                c_alive = _grow(c_alive, ccap)
            top = -1
            bottom = -1
            left = -1
            right = -1
            if (case & 1) != ((case >> 1) & 1):
                top, npt = _point(fr, c0 + _fraction(ul, ur), h_top, c0, pix_top, pix_bot, r0, pt_r, pt_c, npt)
            if ((case >> 2) & 1) != ((case >> 3) & 1):
                bottom, npt = _point(fr + 1.0, c0 + _fraction(ll, lr), h_bot, c0, pix_top, pix_bot, r0,
                                     pt_r, pt_c, npt)
            if (case & 1) != ((case >> 2) & 1):
                left, npt = _point(r0 + _fraction(ul, ll), c0 * 1.0, v_row, c0, pix_top, pix_bot, r0,
                                   pt_r, pt_c, npt)
            if ((case >> 1) & 1) != ((case >> 3) & 1):
                right, npt = _point(r0 + _fraction(ur, lr), c1 * 1.0, v_row, c1, pix_top, pix_bot, r0,
                                    pt_r, pt_c, npt)
            # segments (from, to) in find_contours' order; saddles with low values fully connected
            if case == 1:
                a0, b0, a1, b1 = top, left, -1, -1
            elif case == 2:
                a0, b0, a1, b1 = right, top, -1, -1
            elif case == 3:
                a0, b0, a1, b1 = right, left, -1, -1
            elif case == 4:
                a0, b0, a1, b1 = left, bottom, -1, -1
            elif case == 5:
                a0, b0, a1, b1 = top, bottom, -1, -1
            elif case == 6:
                a0, b0, a1, b1 = right, top, left, bottom
            elif case == 7:
                a0, b0, a1, b1 = right, bottom, -1, -1
            elif case == 8:
                a0, b0, a1, b1 = bottom, right, -1, -1
            elif case == 9:
                a0, b0, a1, b1 = top, left, bottom, right
            elif case == 10:
                a0, b0, a1, b1 = bottom, top, -1, -1
            elif case == 11:
                a0, b0, a1, b1 = bottom, left, -1, -1
            elif case == 12:
                a0, b0, a1, b1 = left, right, -1, -1
            elif case == 13:
                a0, b0, a1, b1 = top, right, -1, -1
            else:  # 14
                a0, b0, a1, b1 = left, top, -1, -1
            nnode, ncont = _add_segment(a0, b0, starts, ends, node_pid, node_next, c_first, c_last, c_len,
                                        c_alive, nnode, ncont)
            if a1 >= 0:
                nnode, ncont = _add_segment(a1, b1, starts, ends, node_pid, node_next, c_first, c_last, c_len,
                                            c_alive, nnode, ncont)
    nverts = 0
    nalive = 0
    for k in range(ncont):
        if c_alive[k]:
            nverts += c_len[k]
            nalive += 1
    verts = np.empty(nverts, np.int32)
    bounds = np.empty(nalive + 1, np.int32)
    bounds[0] = 0
    j = 0
    m = 0
    for k in range(ncont):
        if not c_alive[k]:
            continue
        node = c_first[k]
        while node >= 0:
            verts[j] = node_pid[node]
            j += 1
            node = node_next[node]
        m += 1
        bounds[m] = j
    return pt_r[:npt], pt_c[:npt], verts, bounds


# segments of each marching-squares case as (from, to, from, to) edge codes, in find_contours' order
# (0 top, 1 bottom, 2 left, 3 right; -1 none); saddles 6 and 9 with low values fully connected
_CASE_SEGMENTS = np.array([
    [-1, -1, -1, -1], [0, 2, -1, -1], [3, 0, -1, -1], [3, 2, -1, -1],
    [2, 1, -1, -1], [0, 1, -1, -1], [3, 0, 2, 1], [3, 1, -1, -1],
    [1, 3, -1, -1], [0, 2, 1, 3], [1, 0, -1, -1], [1, 2, -1, -1],
    [2, 3, -1, -1], [0, 3, -1, -1], [2, 0, -1, -1], [-1, -1, -1, -1]], dtype=np.int64)


@numba.njit(**_JIT)
def _reverse(a, lo, hi):
    """Reverse ``a[lo:hi]`` in place."""
    hi -= 1
    while lo < hi:
        t = a[lo]
        a[lo] = a[hi]
        a[hi] = t
        lo += 1
        hi -= 1


@numba.njit(error_model="numpy", **_JIT)
def _contours_chains(field, table):
    """:func:`_contours` for fields without a vertex on a pixel centre (the usual case).

    Then every vertex lies on one pixel edge and is the end of at most one
    segment and the start of at most one, so the contours are the chains and
    cycles of the successor map.  find_contours' assembly numbers contours by
    their first segment in raster order and closes a cycle with its last
    one, so a cycle starts at the end of its last segment.  Returns
    ``ok = False`` (and empty arrays) when a vertex falls on a pixel centre;
    :func:`_contours` then replays the assembly itself.
    """
    h, w = field.shape
    cap, has_nan = _count_crossed_edges_nan(field)
    cap += 2
    pt_r = np.empty(cap, np.float64)
    pt_c = np.empty(cap, np.float64)
    succ = np.full(cap, -1, np.int32)
    sidx = np.empty(cap, np.int32)
    state = np.zeros(cap, np.uint8)  # 1: has a predecessor, 2: emitted
    h_top = np.empty(w, np.int32)
    h_bot = np.empty(w, np.int32)
    v_row = np.empty(w, np.int32)
    up_top = np.empty(w, np.uint8)  # field > 0 on row r0
    up_bot = np.empty(w, np.uint8)  # field > 0 on row r0 + 1
    cases = np.empty(w, np.uint8)
    cells = np.empty(w, np.int32)
    pos = np.empty(w, np.int32)
    hpos = np.empty(w, np.int32)
    ids = np.empty(4, np.int32)
    npt = 0
    nseg = 0
    on_centre = False
    empty_f = np.empty(0, np.float64)
    empty_i = np.empty(0, np.int32)
    # Each row is done in passes without data-dependent branches: the sign bits of the row, then
    # the crossed edges compacted into a list (an edge's point id is the count of crossed edges
    # before it, so ids come out in raster order), then coordinates for the crossed edges only, then
    # the cases of the cells and the cells with a crossing compacted into a list.  Coordinates are
    # computed as in _fraction: a crossed edge has b != a, so the guard there never applies.
    for c in range(w):
        up_bot[c] = field[0, c] > 0.0
    n = 0
    for c in range(w - 1):
        h_bot[c] = npt + n
        pos[n] = c
        n += up_bot[c] != up_bot[c + 1]
    for i in range(n):
        c = pos[i]
        a = np.float64(field[0, c])
        b = np.float64(field[0, c + 1])
        x = c + (0.0 - a) / (b - a)
        pt_r[npt + i] = 0.0
        pt_c[npt + i] = x
        on_centre |= x == math.floor(x)
    npt += n
    for r0 in range(h - 1):
        r1 = r0 + 1
        h_top, h_bot = h_bot, h_top
        up_top, up_bot = up_bot, up_top
        fr1 = r1 * 1.0
        fr0 = r0 * 1.0
        for c in range(w):
            up_bot[c] = field[r1, c] > 0.0
        # one pass over the row: crossed horizontal edges on row r1 (ids from npt), crossed vertical
        # edges between rows r0 and r1 (ids after those, stored relative), cells with a crossing;
        # three independent counters
        nh = 0
        nv = 0
        ncell = 0
        for c in range(w - 1):
            t0 = up_top[c]
            t1 = up_top[c + 1]
            b0 = up_bot[c]
            b1 = up_bot[c + 1]
            h_bot[c] = npt + nh
            hpos[nh] = c
            nh += b0 != b1
            v_row[c] = nv
            pos[nv] = c
            nv += t0 != b0
            case = t0 | (t1 << 1) | (b0 << 2) | (b1 << 3)
            cases[ncell] = case
            cells[ncell] = c
            ncell += (case != 0) & (case != 15)
        c = w - 1
        v_row[c] = nv
        pos[nv] = c
        nv += up_top[c] != up_bot[c]
        for i in range(nh):
            c = hpos[i]
            a = np.float64(field[r1, c])
            b = np.float64(field[r1, c + 1])
            x = c + (0.0 - a) / (b - a)
            pt_r[npt + i] = fr1
            pt_c[npt + i] = x
            on_centre |= x == math.floor(x)
        npt += nh
        vbase = npt
        for i in range(nv):
            c = pos[i]
            a = np.float64(field[r0, c])
            b = np.float64(field[r1, c])
            y = fr0 + (0.0 - a) / (b - a)
            pt_r[npt + i] = y
            pt_c[npt + i] = c * 1.0
            on_centre |= y == math.floor(y)
        npt += nv
        if on_centre:
            return False, empty_f, empty_f, empty_i, empty_i
        for j in range(ncell):
            c0 = cells[j]
            c1 = c0 + 1
            case = cases[j]
            if has_nan and (math.isnan(field[r0, c0]) or math.isnan(field[r0, c1]) or math.isnan(field[r1, c0])
                            or math.isnan(field[r1, c1])):
                continue
            ids[0] = h_top[c0]
            ids[1] = h_bot[c0]
            ids[2] = v_row[c0] + vbase
            ids[3] = v_row[c1] + vbase
            p = ids[table[case, 0]]
            q = ids[table[case, 1]]
            succ[p] = q
            sidx[p] = nseg
            state[q] = 1
            nseg += 1
            if table[case, 2] >= 0:
                p = ids[table[case, 2]]
                q = ids[table[case, 3]]
                succ[p] = q
                sidx[p] = nseg
                state[q] = 1
                nseg += 1
    out, bounds = _walk_chains(succ, sidx, state, npt, nseg, True)
    return True, pt_r[:npt], pt_c[:npt], out, bounds


@numba.njit(**_JIT)
def _walk_chains(succ, sidx, state, npt, nkey, by_first_segment):
    """Chains and cycles of a successor map as contours: vertex ids ``verts`` and ``bounds``.

    ``succ[p]`` is the point after ``p`` (-1: none), ``sidx[p]`` the raster
    index of the segment from ``p``, ``state[p]`` 1 when ``p`` has a
    predecessor (0 otherwise; set to 2 here when emitted), for the first
    ``npt`` points; segment indices are distinct and below ``nkey``.  Open
    chains start at a point without a predecessor; a cycle starts at the end
    of its last segment and repeats that point at its end.  Contours come
    out ordered by their first segment (find_contours' order) when
    ``by_first_segment``; else open chains, then cycles, each in the order
    of the point id they are found from (point ids follow the rows).
    """
    # open chains, then cycles; each with the index of its first segment
    verts = np.empty(2 * npt, np.int32)  # each point once, the start of a cycle again at its end
    starts = np.empty(npt + 1, np.int64)
    keys = np.empty(npt + 1, np.int64)
    nv = 0
    nc = 0
    for p in range(npt):
        if state[p] != 0 or succ[p] < 0:
            continue
        starts[nc] = nv
        first = sidx[p]
        q = p
        while q >= 0:
            state[q] = 2
            verts[nv] = q
            nv += 1
            if succ[q] >= 0 and sidx[q] < first:
                first = sidx[q]
            q = succ[q]
        keys[nc] = first
        nc += 1
    for p in range(npt):
        if state[p] == 2 or succ[p] < 0:
            continue
        # one walk round the cycle from p, then rotate it to start at the end of its last segment
        base = nv
        starts[nc] = nv
        first = sidx[p]
        last = first
        last_pos = 0
        q = p
        i = 0
        while True:
            state[q] = 2
            verts[nv] = q
            nv += 1
            s = sidx[q]
            if s < first:
                first = s
            if s > last:
                last = s
                last_pos = i
            q = succ[q]
            i += 1
            if q == p:
                break
        k = last_pos + 1
        if k < i:  # rotate verts[base:base + i] left by k: three reversals
            _reverse(verts, base, base + k)
            _reverse(verts, base + k, base + i)
            _reverse(verts, base, base + i)
        start = verts[base]
        verts[nv] = start
        nv += 1
        keys[nc] = first
        nc += 1
    starts[nc] = nv
    bounds = np.empty(nc + 1, np.int32)
    if not by_first_segment:
        for k in range(nc + 1):
            bounds[k] = starts[k]
        return verts[:nv], bounds
    # order by first segment: the keys are distinct, so a table of them sorts
    by_key = np.full(nkey, -1, np.int32)
    for k in range(nc):
        by_key[keys[k]] = k
    order = np.empty(nc, np.int64)
    m = 0
    for key in range(nkey):
        if by_key[key] >= 0:
            order[m] = by_key[key]
            m += 1
    out = np.empty(nv, np.int32)
    bounds[0] = 0
    j = 0
    for m in range(nc):
        k = order[m]
        for i in range(starts[k], starts[k + 1]):
            out[j] = verts[i]
            j += 1
        bounds[m + 1] = j
    return out, bounds


@numba.njit(**_JIT)
def _level_set(field, table):
    """Zero contours of ``field`` as find_contours(field, 0.0): points, vertex ids, contour bounds."""
    ok, pt_r, pt_c, verts, bounds = _contours_chains(field, table)
    if ok:
        return pt_r, pt_c, verts, bounds
    return _contours(field)


# --------------------------------------------------------------------------- strength, runs, rule


@numba.njit(inline="always", **_JIT)
def _keys_weights(t):
    # crossings._keys_weights: the same expressions in the same order
    if t == 0.0:
        return (0.0, 0.0, 1.0, 0.0, 0.0, 0.0)
    s0 = t + 2.0
    s1 = t + 1.0
    s4 = 2.0 - t
    s5 = 3.0 - t
    u = 1.0 - t
    return (((1.0 / 12.0 * s0 - 2.0 / 3.0) * s0 + 1.75) * s0 - 1.5,
            ((-7.0 / 12.0 * s1 + 3.0) * s1 - 59.0 / 12.0) * s1 + 2.5,
            (4.0 / 3.0 * t - 7.0 / 3.0) * t * t + 1.0,
            (4.0 / 3.0 * u - 7.0 / 3.0) * u * u + 1.0,
            ((-7.0 / 12.0 * s4 + 3.0) * s4 - 59.0 / 12.0) * s4 + 2.5,
            ((1.0 / 12.0 * s5 - 2.0 / 3.0) * s5 + 1.75) * s5 - 1.5)


@numba.njit(inline="always", **_JIT)
def _taps6(w, a0, a1, a2, a3, a4, a5):
    """Weighted sum of six taps, in the order of crossings.sample_cubic."""
    out = 0.0
    out += w[0] * np.float64(a0)
    out += w[1] * np.float64(a1)
    out += w[2] * np.float64(a2)
    out += w[3] * np.float64(a3)
    out += w[4] * np.float64(a4)
    out += w[5] * np.float64(a5)
    return out


@numba.njit(**_JIT)
def _sample_cubic(image, r, c):
    # same taps, weights and summation order as crossings.sample_cubic
    h, w = image.shape
    r0 = math.floor(r)
    c0 = math.floor(c)
    wr = _keys_weights(r - r0)
    wc = _keys_weights(c - c0)
    ir0 = int(r0)
    ic0 = int(c0)
    j0 = min(max(ic0 - 2, 0), w - 1)
    j1 = min(max(ic0 - 1, 0), w - 1)
    j2 = min(max(ic0, 0), w - 1)
    j3 = min(max(ic0 + 1, 0), w - 1)
    j4 = min(max(ic0 + 2, 0), w - 1)
    j5 = min(max(ic0 + 3, 0), w - 1)
    out = 0.0
    for i in range(6):
        ri = min(max(ir0 + i - 2, 0), h - 1)
        acc = _taps6(wc, image[ri, j0], image[ri, j1], image[ri, j2], image[ri, j3], image[ri, j4], image[ri, j5])
        out += wr[i] * acc
    return out


@numba.njit(**_JIT)
def _sample_on_edge(image, r, c):
    """:func:`_sample_cubic` at a vertex on a pixel edge, for finite ``image``: 6 taps instead of 36.

    One coordinate of a marching-squares vertex is an integer; there the
    weights are exactly (0, 0, 1, 0, 0, 0), so the 36-tap sum reduces to the
    6-tap sum along the other axis, bit for bit, except possibly for the
    sign of a zero result (recomputed with all taps).
    """
    h, w = image.shape
    fr = math.floor(r)
    if r == fr:
        ri = min(max(int(fr), 0), h - 1)
        c0 = math.floor(c)
        wc = _keys_weights(c - c0)
        ic0 = int(c0)
        row = image[ri]
        out = _taps6(wc, row[min(max(ic0 - 2, 0), w - 1)], row[min(max(ic0 - 1, 0), w - 1)],
                     row[min(max(ic0, 0), w - 1)], row[min(max(ic0 + 1, 0), w - 1)],
                     row[min(max(ic0 + 2, 0), w - 1)], row[min(max(ic0 + 3, 0), w - 1)])
    else:
        ci = min(max(int(math.floor(c)), 0), w - 1)
        if c != math.floor(c):
            return _sample_cubic(image, r, c)
        wr = _keys_weights(r - fr)
        ir0 = int(fr)
        out = _taps6(wr, image[min(max(ir0 - 2, 0), h - 1), ci], image[min(max(ir0 - 1, 0), h - 1), ci],
                     image[min(max(ir0, 0), h - 1), ci], image[min(max(ir0 + 1, 0), h - 1), ci],
                     image[min(max(ir0 + 2, 0), h - 1), ci], image[min(max(ir0 + 3, 0), h - 1), ci])
    if out == 0.0:
        return _sample_cubic(image, r, c)
    return out


@numba.njit(**_JIT)
def _all_finite(a):
    for v in a.ravel():
        if not math.isfinite(v):
            return False
    return True


@numba.njit(inline="always", **_JIT)
def _strength_on_row(strength, finite, ri, lc):
    """Vertex strength at (``ri``, ``lc``) on pixel row ``ri``: :func:`_sample_cubic`, clipped at 0.

    For finite ``strength`` away from the side columns the 6 taps along the
    row are read unclamped (:func:`_sample_on_edge`'s sum); ``lc`` is finite.
    """
    w = strength.shape[1]
    c0 = math.floor(lc)
    ic0 = int(c0)
    if finite and 2 <= ic0 <= w - 4:
        wc = _keys_weights(lc - c0)
        v = _taps6(wc, strength[ri, ic0 - 2], strength[ri, ic0 - 1], strength[ri, ic0],
                   strength[ri, ic0 + 1], strength[ri, ic0 + 2], strength[ri, ic0 + 3])
        if v == 0.0:
            v = _sample_cubic(strength, ri * 1.0, lc)
    elif finite:
        v = _sample_on_edge(strength, ri * 1.0, lc)
    else:
        v = _sample_cubic(strength, ri * 1.0, lc)
    if not (v >= 0.0 or v != v):  # np.maximum(v, 0.0)
        v = 0.0
    return v


@numba.njit(inline="always", **_JIT)
def _strength_on_column(strength, finite, lr, ci):
    """:func:`_strength_on_row` for a vertex (``lr``, ``ci``) on pixel column ``ci``."""
    h = strength.shape[0]
    r0 = math.floor(lr)
    ir0 = int(r0)
    if finite and 2 <= ir0 <= h - 4:
        wr = _keys_weights(lr - r0)
        v = _taps6(wr, strength[ir0 - 2, ci], strength[ir0 - 1, ci], strength[ir0, ci],
                   strength[ir0 + 1, ci], strength[ir0 + 2, ci], strength[ir0 + 3, ci])
        if v == 0.0:
            v = _sample_cubic(strength, lr, ci * 1.0)
    elif finite:
        v = _sample_on_edge(strength, lr, ci * 1.0)
    else:
        v = _sample_cubic(strength, lr, ci * 1.0)
    if not (v >= 0.0 or v != v):  # np.maximum(v, 0.0)
        v = 0.0
    return v


@numba.njit(inline="always", **_JIT)
def _passes_low(sv, low32, low64, low_in_f64):
    """``sv >= low`` for a float32 strength, compared as NumPy compares it (see the module docstring)."""
    if low_in_f64:
        return np.float64(sv) >= low64
    return sv >= low32


@numba.njit(**_JIT)
def _vertex_strengths(pt_r, pt_c, strength, mask, finite, low32, low64, low_in_f64):
    """Strength (float32) and keep flag (strength >= low, nearest pixel in ``mask``) of every point.

    Points whose nearest pixel is outside the mask get strength 0 and no
    keep flag (they cannot be in a run).  Sampled in point order (close to
    raster order: the strength map is read cache-friendly).
    """
    h, w = mask.shape
    npt = pt_r.size
    s_pt = np.zeros(npt, np.float32)
    keep_pt = np.zeros(npt, np.bool_)
    for p in range(npt):
        lr = pt_r[p]
        lc = pt_c[p]
        if lr != lr or lc != lc:  # next to a NaN of the field: on no contour
            continue
        ri = min(max(int(np.rint(lr)), 0), h - 1)
        ci = min(max(int(np.rint(lc)), 0), w - 1)
        if not mask[ri, ci]:
            continue
        if lr == ri:
            v = _strength_on_row(strength, finite, ri, lc)
        elif lc == ci:
            v = _strength_on_column(strength, finite, lr, ci)
        else:  # not on a pixel edge (not produced by marching squares)
            v = _sample_cubic(strength, lr, lc)
            if not (v >= 0.0 or v != v):
                v = 0.0
        sv = np.float32(v)
        s_pt[p] = sv
        keep_pt[p] = _passes_low(sv, low32, low64, low_in_f64)
    return s_pt, keep_pt


@numba.njit(**_JIT)
def _pairwise_leaf(a, lo, n):
    # NumPy's pairwise summation for n <= 128: eight interleaved partial sums
    if n < 8:
        res = a[lo]  # NumPy starts from 0; 0 + a[lo] == a[lo]
        for i in range(1, n):
            res += a[lo + i]
        return res
    r0 = a[lo]
    r1 = a[lo + 1]
    r2 = a[lo + 2]
    r3 = a[lo + 3]
    r4 = a[lo + 4]
    r5 = a[lo + 5]
    r6 = a[lo + 6]
    r7 = a[lo + 7]
    i = 8
    stop = n - n % 8
    while i < stop:
        r0 += a[lo + i]
        r1 += a[lo + i + 1]
        r2 += a[lo + i + 2]
        r3 += a[lo + i + 3]
        r4 += a[lo + i + 4]
        r5 += a[lo + i + 5]
        r6 += a[lo + i + 6]
        r7 += a[lo + i + 7]
        i += 8
    res = ((r0 + r1) + (r2 + r3)) + ((r4 + r5) + (r6 + r7))
    while i < n:
        res += a[lo + i]
        i += 1
    return res


@numba.njit(**_JIT)
def _pairwise_sum(a, lo, n):
    """NumPy's pairwise summation of ``a[lo:lo + n]`` (n >= 1) in the dtype of ``a``, as ``np.add.reduce``.

    Blocks of at most 128 are summed by :func:`_pairwise_leaf`; longer
    stretches split at half their length rounded down to a multiple of 8.
    The split tree is walked with an explicit stack (recursive functions do
    not load reliably from numba's cache).
    """
    if n <= 128:
        return _pairwise_leaf(a, lo, n)
    st_lo = np.empty(256, np.int64)
    st_n = np.empty(256, np.int64)
    st_done = np.zeros(256, np.bool_)
    vals = np.empty(256, a.dtype)
    nv = 0
    top = 0
    st_lo[0] = lo
    st_n[0] = n
    st_done[0] = False
    while top >= 0:
        m = st_n[top]
        if m <= 128:
            vals[nv] = _pairwise_leaf(a, st_lo[top], m)
            nv += 1
            top -= 1
        elif st_done[top]:
            vals[nv - 2] = vals[nv - 2] + vals[nv - 1]
            nv -= 1
            top -= 1
        else:
            st_done[top] = True
            n2 = m // 2
            n2 -= n2 % 8
            l0 = st_lo[top]
            st_lo[top + 1] = l0 + n2
            st_n[top + 1] = m - n2
            st_done[top + 1] = False
            st_lo[top + 2] = l0
            st_n[top + 2] = n2
            st_done[top + 2] = False
            top += 2
    return vals[0]


@numba.njit(**_JIT)
def _keep_run(pr, pc, ps, m, high, use_sustained, sustained, sustained_length, dpath):
    """crossings.keep_run on the first ``m`` entries (``dpath`` is scratch space).

    Segments must be shorter than 1.5 (marching-squares segments are at most sqrt(2) long).
    """
    if m < 2:
        return False
    smax = ps[0]
    for i in range(1, m):
        if ps[i] > smax:
            smax = ps[i]
    if np.float64(smax) >= high:
        return True
    if not use_sustained:
        return False
    # a segment joins two points on the edges of one cell, so it is at most sqrt(2) < 1.5 long:
    # a run too short to reach sustained_length is dropped first, then the mean, and the path
    # only when both pass (the result is the same)
    if 1.5 * (m - 1) < sustained_length:
        return False
    mean = np.float32(np.float64(_pairwise_sum(ps, 0, m)) / np.float64(m))
    if not np.float64(mean) >= sustained:
        return False
    for i in range(m - 1):
        dpath[i] = math.hypot(pr[i + 1] - pr[i], pc[i + 1] - pc[i])
    path = _pairwise_sum(dpath, 0, m - 1)
    return path >= sustained_length


@numba.njit(inline="always", **_JIT)
def _wrap(i, n):
    """``i % n`` for ``0 <= i``, without a division (here ``i < 2 * n``)."""
    while i >= n:
        i -= n
    return i


@numba.njit(**_JIT)
def _select(pt_r, pt_c, verts, bounds, s_pt, keep_pt, high, use_sustained, sustained, sustained_length,
            off_r, off_c, core_r0, core_c0, core_r1, core_c1):
    """Runs kept or shared along every contour, as in crossings._trace.

    ``s_pt`` and ``keep_pt`` are the strength and keep flag of each point;
    ``keep_pt`` empty means every point is kept (the runs of
    :func:`_strong_runs` as contours: each open one is its own single run,
    each cycle a ring kept whole).  Returns flat piece arrays (rows, cols, strength, bounds) and flat
    fragment arrays (rows, cols, strength, bounds, start_open, end_open).
    """
    lo_r = core_r0 - 0.5
    hi_r = core_r1 - 0.5
    lo_c = core_c0 - 0.5
    hi_c = core_c1 - 0.5
    nmax = 1
    for k in range(bounds.size - 1):
        nmax = max(nmax, bounds[k + 1] - bounds[k])
    rows = np.empty(nmax + 1, np.float64)
    cols = np.empty(nmax + 1, np.float64)
    s = np.zeros(nmax + 1, np.float32)
    keep = np.empty(nmax, np.bool_)
    owned = np.empty(nmax, np.bool_)
    pr = np.empty(nmax + 1, np.float64)
    pc = np.empty(nmax + 1, np.float64)
    ps = np.empty(nmax + 1, np.float32)
    dpath = np.empty(nmax + 1, np.float64)
    run_a = np.empty(nmax + 1, np.int64)
    run_b = np.empty(nmax + 1, np.int64)

    p_r = np.empty(1024, np.float64)
    p_c = np.empty(1024, np.float64)
    p_s = np.empty(1024, np.float32)
    p_b = np.zeros(64, np.int64)
    np_v = 0
    np_k = 0
    f_r = np.empty(1024, np.float64)
    f_c = np.empty(1024, np.float64)
    f_s = np.empty(1024, np.float32)
    f_b = np.zeros(64, np.int64)
    f_so = np.zeros(64, np.bool_)
    f_eo = np.zeros(64, np.bool_)
    nf_v = 0
    nf_k = 0

    for k in range(bounds.size - 1):
        a0 = bounds[k]
        n = bounds[k + 1] - a0
        if n < 2:
            continue
        first = verts[a0]
        last = verts[a0 + n - 1]
        closed = n > 3 and pt_r[first] == pt_r[last] and pt_c[first] == pt_c[last]
        if closed:
            n -= 1
        nruns = 0
        all_keep = True
        shift = 0
        if keep_pt.size == 0:  # a run of _strong_runs
            run_a[0] = 0
            run_b[0] = n
            nruns = 1
        else:
            # keep flags first; coordinates and strengths are gathered only for the vertices of runs
            any_keep = False
            for i in range(n):
                kp = keep_pt[verts[a0 + i]]
                keep[i] = kp
                any_keep |= kp
            if not any_keep:
                continue
            # hysteresis runs of keep (every keep vertex is a seed), wrapping on closed contours
            for i in range(n):
                if not keep[i]:
                    all_keep = False
                    shift = i
                    break
        if closed and all_keep:
            run_a[0] = 0
            run_b[0] = n
            nruns = 1
        elif keep_pt.size > 0:
            if not closed:
                shift = 0
            i = 0
            while i < n:
                if keep[_wrap(i + shift, n)]:
                    j = i
                    while j < n and keep[_wrap(j + shift, n)]:
                        j += 1
                    run_a[nruns] = i + shift
                    run_b[nruns] = j + shift
                    nruns += 1
                    i = j
                else:
                    i += 1
        for q in range(nruns):
            a = run_a[q]
            b = run_b[q]
            whole_ring = closed and b - a == n
            m = b - a + (1 if whole_ring else 0)
            if m < 2:
                continue
            # the run's vertices in contour order (vertex t is contour vertex (a + t) % n)
            for t in range(m):
                pv = verts[a0 + _wrap(a + t, n)]
                rows[t] = pt_r[pv] + off_r
                cols[t] = pt_c[pv] + off_c
                s[t] = s_pt[pv]
            # ownership of segment t (vertex t to t + 1) by its midpoint
            n_own = 0
            for t in range(m - 1):
                mr = 0.5 * (rows[t] + rows[t + 1])
                mc = 0.5 * (cols[t] + cols[t + 1])
                ow = (mr >= lo_r) and (mr < hi_r) and (mc >= lo_c) and (mc < hi_c)
                owned[t] = ow
                n_own += ow
            if n_own == m - 1:
                if whole_ring:
                    # canonical_ring: start at the smallest (row, col), first one on ties
                    best = 0
                    for t in range(1, n):
                        if rows[t] < rows[best] or (rows[t] == rows[best] and cols[t] < cols[best]):
                            best = t
                    for t in range(m):
                        it = _wrap(best + t, n)
                        pr[t] = rows[it]
                        pc[t] = cols[it]
                        ps[t] = s[it]
                    kr, kc, ks = pr, pc, ps
                else:
                    kr, kc, ks = rows, cols, s
                if _keep_run(kr, kc, ks, m, high, use_sustained, sustained, sustained_length, dpath):
                    p_r = _grow(p_r, np_v + m)
                    p_c = _grow(p_c, np_v + m)
                    p_s = _grow(p_s, np_v + m)
                    p_b = _grow(p_b, np_k + 2)
                    for t in range(m):
                        p_r[np_v + t] = kr[t]
                        p_c[np_v + t] = kc[t]
                        p_s[np_v + t] = ks[t]
                    np_v += m
                    np_k += 1
                    p_b[np_k] = np_v
                continue
            if n_own == 0:
                continue
            # maximal owned stretches of the run's segments become fragments
            nseg = m - 1
            t = 0
            while t < nseg:
                if not owned[t]:
                    t += 1
                    continue
                e = t
                while e < nseg and owned[e]:
                    e += 1
                cnt = e - t + 1
                f_r = _grow(f_r, nf_v + cnt)
                f_c = _grow(f_c, nf_v + cnt)
                f_s = _grow(f_s, nf_v + cnt)
                if nf_k + 2 > f_b.size:
                    f_b = _grow(f_b, nf_k + 2)
                    f_so = _grow(f_so, f_b.size)
                    f_eo = _grow(f_eo, f_b.size)
                for u in range(cnt):
                    f_r[nf_v + u] = rows[t + u]
                    f_c[nf_v + u] = cols[t + u]
                    f_s[nf_v + u] = s[t + u]
                f_so[nf_k] = t > 0 or whole_ring
                f_eo[nf_k] = e < nseg or whole_ring
                nf_v += cnt
                nf_k += 1
                f_b[nf_k] = nf_v
                t = e
    return (p_r[:np_v], p_c[:np_v], p_s[:np_v], p_b[:np_k + 1],
            f_r[:nf_v], f_c[:nf_v], f_s[:nf_v], f_b[:nf_k + 1], f_so[:nf_k], f_eo[:nf_k])


# --------------------------------------------------------------------------- strong runs only


@numba.njit(error_model="numpy", **_JIT)
def _strong_runs(field, strength, mask, low32, low64, low_in_f64, table):
    """The hysteresis runs of the zero level set of ``field``, without assembling whole contours.

    Marching squares a row at a time as in :func:`_contours_chains`; each
    crossed pixel edge gets its vertex strength at once, and only vertices
    that pass (nearest pixel in ``mask``, strength >= low) get a point id.
    Only segments joining two such points are linked, so the chains and
    cycles of that successor map are the runs: a run is a maximal stretch of
    passing vertices along a contour, consecutive contour vertices are the
    ends of one segment, and a vertex on a pixel edge ends at most one
    segment and starts at most one.  A cycle is a closed contour that passes
    everywhere, with find_contours' start vertex (:func:`_walk_chains`).

    Returns ``ok``, the points' coordinates and float32 strengths, and the
    runs as vertex ids and bounds (cycles repeat their first point; open runs
    first).  ``ok`` is False (and the arrays are empty) when a passing
    vertex lies on a pixel centre, where several segments may meet;
    :func:`_contours` then assembles the whole level set.
    """
    h, w = field.shape
    cap = 1024 + (h * w) // 32
    # rows of the strength map without NaN or infinity, checked just ahead of use: where all the
    # rows a vertex's 36 taps can come from are finite, its 6 taps on the pixel edge give the sum
    finite_row = np.empty(h, np.bool_)
    n_checked = 0
    pt_r = np.empty(cap, np.float64)
    pt_c = np.empty(cap, np.float64)
    pt_s = np.empty(cap, np.float32)
    succ = np.empty(cap, np.int32)
    sidx = np.empty(cap, np.int32)
    state = np.empty(cap, np.uint8)  # 1: has a predecessor, 2: emitted
    # point id (-1: the vertex does not pass) of the crossed edges of the current band of cells;
    # entries of edges that are not crossed are stale, and never read
    h_top = np.empty(w, np.int32)
    h_bot = np.empty(w, np.int32)
    v_row = np.empty(w, np.int32)
    up_top = np.empty(w, np.uint8)
    up_bot = np.empty(w, np.uint8)
    pos = np.empty(w, np.int32)
    hpos = np.empty(w, np.int32)
    ids = np.empty(4, np.int32)
    npt = 0
    # passing vertices: ids top0 .. top1 - 1 on row r0, bot0 .. bot1 - 1 on row r1, bot1 .. npt - 1
    # between the two rows
    top0 = top1 = bot0 = bot1 = 0
    empty_f = np.empty(0, np.float64)
    empty_s = np.empty(0, np.float32)
    empty_i = np.empty(0, np.int32)
    odd_top = False  # a NaN or infinite value on row r0
    odd_bot = False  # on row r1
    for c in range(w):
        v = field[0, c]
        up_bot[c] = v > 0.0
        odd_bot |= (v - v) != 0.0  # NaN or infinite
    nh = 0
    for c in range(w - 1):
        hpos[nh] = c
        nh += up_bot[c] != up_bot[c + 1]
    for r0 in range(-1, h - 1):
        r1 = r0 + 1
        if r0 >= 0:
            h_top, h_bot = h_bot, h_top
            up_top, up_bot = up_bot, up_top
            odd_top = odd_bot
            odd_bot = False
            for c in range(w):
                v = field[r1, c]
                up_bot[c] = v > 0.0
                odd_bot |= (v - v) != 0.0  # NaN or infinite
            # one pass: crossed horizontal edges on row r1 and crossed vertical edges between rows
            # r0 and r1 compacted into lists; two independent counters
            nh = 0
            nv = 0
            for c in range(w - 1):
                b0 = up_bot[c]
                hpos[nh] = c
                nh += b0 != up_bot[c + 1]
                pos[nv] = c
                nv += up_top[c] != b0
            c = w - 1
            pos[nv] = c
            nv += up_top[c] != up_bot[c]
        else:
            nv = 0
        if npt + nh + nv + 1 > pt_r.size:  # and a spare slot
            need = npt + nh + nv + 1
            pt_r = _grow(pt_r, need)
            pt_c = _grow(pt_c, need)
            pt_s = _grow(pt_s, need)
            succ = _grow(succ, need)
            sidx = _grow(sidx, need)
            state = _grow(state, need)
        # vertices and strengths of the crossed edges (coordinates as in _fraction: b != a there).
        # Without branches on the outcome: every vertex is written at npt, and npt advances when it
        # passes; a vertex next to a NaN or an infinity of the field (only in rows with one) may
        # have NaN coordinates, and then does not pass.
        mrow = mask[r1]
        fr1 = r1 * 1.0
        centre = False
        top0 = bot0
        top1 = bot1
        bot0 = npt
        while n_checked < min(r1 + 5, h):
            fine = True
            for v in strength[n_checked]:
                fine &= (v - v) == 0.0
            finite_row[n_checked] = fine
            n_checked += 1
        finite_h = True  # rows r1 - 2 .. r1 + 3 (the taps of a vertex on row r1)
        for r in range(max(r1 - 2, 0), min(r1 + 4, h)):
            finite_h &= finite_row[r]
        finite_v = True  # rows r0 - 2 .. r0 + 4 (of a vertex between rows r0 and r1, or on row r1)
        for r in range(max(r0 - 2, 0), min(r0 + 5, h)):
            finite_v &= finite_row[r]
        for i in range(nh):
            c = hpos[i]
            a = np.float64(field[r1, c])
            b = np.float64(field[r1, c + 1])
            x = c + (0.0 - a) / (b - a)
            if odd_bot and x != x:
                h_bot[c] = -1
                continue
            ci = min(max(int(np.rint(x)), 0), w - 1)
            sv = np.float32(_strength_on_row(strength, finite_h, r1, x))
            ok = mrow[ci] & _passes_low(sv, low32, low64, low_in_f64)
            pt_r[npt] = fr1
            pt_c[npt] = x
            pt_s[npt] = sv
            succ[npt] = -1
            state[npt] = 0
            h_bot[c] = npt if ok else -1
            centre |= ok & (x == math.floor(x))
            npt += ok
        bot1 = npt
        fr0 = r0 * 1.0
        odd_band = odd_top or odd_bot
        for i in range(nv):
            c = pos[i]
            a = np.float64(field[r0, c])
            b = np.float64(field[r1, c])
            y = fr0 + (0.0 - a) / (b - a)
            if odd_band and y != y:
                v_row[c] = -1
                continue
            ri = min(max(int(np.rint(y)), 0), h - 1)
            sv = np.float32(_strength_on_column(strength, finite_v, y, c))
            ok = mask[ri, c] & _passes_low(sv, low32, low64, low_in_f64)
            pt_r[npt] = y
            pt_c[npt] = c * 1.0
            pt_s[npt] = sv
            succ[npt] = -1
            state[npt] = 0
            v_row[c] = npt if ok else -1
            centre |= ok & (y == math.floor(y))
            npt += ok
        if centre:
            return False, empty_f, empty_f, empty_s, empty_i, empty_i
        if r0 < 0:
            continue
        # Link each passing vertex to the next one.  A crossed edge starts a segment in exactly one of
        # its two cells (find_contours' case table): a row edge in the cell below when its left
        # pixel is high, else in the cell above; a column edge in the cell to its left when its top
        # pixel is high, else in the cell to its right.  The segment's key is its index in raster
        # order of cells (two per saddle cell), the order in which find_contours adds segments.
        # A vertex that starts no segment in this band, or whose segment ends at a vertex that does
        # not pass, writes to the spare last slot instead (no branch on the outcome).
        spare = succ.size - 1
        n_top = top1 - top0
        for i in range(n_top + npt - bot0):
            if i < n_top:  # on row r0: the top edge of cell c
                p = top0 + i
                c = int(pt_c[p])  # the edge's first column (no passing vertex is on a pixel centre)
                c0 = c
                e = 0
                here = up_top[c] == 1
            else:
                p = bot0 + i - n_top
                c = int(pt_c[p])
                if p < bot1:  # on row r1: the bottom edge of cell c
                    c0 = c
                    e = 1
                    here = up_bot[c + 1] == 1
                else:  # on column c between the rows: the right edge of cell c - 1 or the left of cell c
                    hi = np.int64(up_top[c])
                    c0 = c - hi
                    e = 2 + hi
                    here = (c0 >= 0) & (c0 <= w - 2)
            c0 = min(max(c0, 0), w - 2)
            c1 = c0 + 1
            if odd_band and (math.isnan(field[r0, c0]) or math.isnan(field[r0, c1])
                             or math.isnan(field[r1, c0]) or math.isnan(field[r1, c1])):
                here = False  # find_contours skips cells with a NaN corner
            case = up_top[c0] | (up_top[c1] << 1) | (up_bot[c0] << 2) | (up_bot[c1] << 3)
            k = 0 if table[case, 0] == e else 2
            t = table[case, k + 1] & 3  # the edge where the segment ends
            ids[0] = h_top[c0]
            ids[1] = h_bot[c0]
            ids[2] = v_row[c0]
            ids[3] = v_row[c1]
            q = ids[t]
            link = here & (q >= 0)
            at = p if link else spare
            succ[at] = q
            sidx[at] = 2 * (r0 * (w - 1) + c0) + (k >> 1)
            state[q if link else spare] = 1
    verts, bounds = _walk_chains(succ, sidx, state, npt, 2 * (h - 1) * (w - 1), False)
    return True, pt_r[:npt], pt_c[:npt], pt_s[:npt], verts, bounds


@numba.njit(**_JIT)
def _window_to_raster(pt_r, pt_c, field, off_r, off_c):
    """crossings.window_to_raster, compiled: raster indices of the points, each rounded once."""
    n = pt_r.size
    out_r = np.empty(n, np.float64)
    out_c = np.empty(n, np.float64)
    for p in range(n):
        r = pt_r[p]
        c = pt_c[p]
        fr = math.floor(r)
        fc = math.floor(c)
        if r == fr and c != fc:  # on a row: the edge from (r, fc) to (r, fc + 1)
            ri = int(fr)
            ci = int(fc)
            a = np.float64(field[ri, ci])
            b = np.float64(field[ri, ci + 1])
            out_r[p] = r + off_r
            out_c[p] = (fc + off_c) + (0.0 - a) / (b - a)
        elif c == fc and r != fr:  # on a column
            ri = int(fr)
            ci = int(fc)
            a = np.float64(field[ri, ci])
            b = np.float64(field[ri + 1, ci])
            out_r[p] = (fr + off_r) + (0.0 - a) / (b - a)
            out_c[p] = c + off_c
        else:  # integral (a pixel centre) or NaN
            out_r[p] = r + off_r
            out_c[p] = c + off_c
    return out_r, out_c


# --------------------------------------------------------------------------- Python interface


def _as_float(a: np.ndarray) -> np.ndarray:
    a = np.asarray(a)
    if a.dtype != np.float32:
        a = a.astype(np.float64, copy=False)
    return np.ascontiguousarray(a)


def _check_window(field: np.ndarray) -> None:
    if field.ndim != 2 or field.shape[0] < 2 or field.shape[1] < 2:
        raise ValueError("Input array must be at least 2x2.")  # as find_contours
    if field.size > _MAX_PIXELS:
        raise ValueError(f"window of {field.size} pixels is larger than {_MAX_PIXELS} (int32 ids)")


def level_contours(field: np.ndarray) -> list[np.ndarray]:
    """Zero contours of ``field`` exactly as ``skimage.measure.find_contours(field, 0.0)`` returns them.

    Parameters
    ----------
    field : ndarray, shape (rows, cols), float32 or float64
        At least 2 x 2.  Cells with a NaN corner are skipped.

    Returns
    -------
    list of ndarray, shape (n, 2), float64
        ``(row, col)`` vertices in pixel-centre indices; closed contours
        repeat their first vertex at the end.  Same vertices, orientation,
        start vertices and order as ``find_contours`` with its defaults.
    """
    field = _as_float(field)
    _check_window(field)
    pt_r, pt_c, verts, bounds = _level_set(field, _CASE_SEGMENTS)
    xy = np.stack([pt_r[verts], pt_c[verts]], axis=1)
    return [xy[bounds[k]:bounds[k + 1]] for k in range(bounds.size - 1)]


def trace_compiled(field: np.ndarray, strength: np.ndarray, usable: np.ndarray, *,
                   high: float, low: float, sustained: float | None = None,
                   sustained_length_px: float = np.inf, allowed: np.ndarray | None = None,
                   offset: tuple[int, int] = (0, 0), core: Core | None = None) -> tuple[list, list]:
    """Trace every zero crossing of one window in compiled code; keep strong runs.

    Same contract and result as
    :func:`lineament.crossings.trace_level_set_reference`: the same pieces
    and fragments, each with the same vertices in the same direction, the
    same strengths and open flags, though the lists may be in another order
    (see the module docstring for how that is kept).

    Parameters
    ----------
    field : ndarray, shape (rows, cols), float32 or float64
        Field whose zero level set is traced (at least 2 x 2 when the mask
        has a true cell).
    strength : ndarray, shape (rows, cols), float32 or float64
        Strength per pixel, in the units of the raster values; sampled at
        vertices by 6-point cubic convolution (Keys 1981).
    usable : ndarray of bool, shape (rows, cols)
        Cells far enough from voids and the raster edge (nearest cell decides).
    high, low : float
        Hysteresis thresholds, strength units (see
        :func:`~lineament.crossings.keep_run`).
    sustained : float, optional
        Mean strength that keeps a run without a seed when it is at least
        ``sustained_length_px`` long.
    sustained_length_px : float
        Path length in pixels for the sustained rule.
    allowed : ndarray of bool, shape (rows, cols), optional
        Where the level set counts at all.
    offset : (int, int)
        Global index of the window's first row and column.
    core : Core, optional
        The part of the raster this window owns, global indices (default:
        all of it).

    Returns
    -------
    pieces : list of (rows, cols, strength)
        float64, float64, float32 arrays, shape (n,), global pixel-centre
        indices; runs owned entirely by this window that pass the rule.
        Closed rings start at their smallest vertex and repeat it at the end.
        The arrays are views of one buffer per call.
    fragments : list of Fragment
        Owned parts of runs that continue into other windows.
    """
    pieces: list = []
    fragments: list[Fragment] = []
    mask = usable if allowed is None else (usable & allowed)
    if not mask.any():
        return pieces, fragments
    field = _as_float(field)
    _check_window(field)
    h, w = field.shape
    if core is None:
        core = Core(offset[0], offset[1], offset[0] + h, offset[1] + w)
    # NumPy compares a float32 array with a Python float in float32, with a NumPy float64 in float64
    low_in_f64 = np.result_type(np.float32, low) == np.float64
    strength = _as_float(strength)
    mask = np.ascontiguousarray(mask, dtype=np.bool_)
    low_args = (np.float32(low), float(low), bool(low_in_f64))
    ok, pt_r, pt_c, s_pt, verts, bounds = _strong_runs(field, strength, mask, *low_args, _CASE_SEGMENTS)
    if ok:
        keep_pt = np.zeros(0, np.bool_)  # every point of every run is kept
    else:  # a passing vertex on a pixel centre: assemble the whole level set
        pt_r, pt_c, verts, bounds = _contours(field)
        s_pt, keep_pt = _vertex_strengths(pt_r, pt_c, strength, mask, _all_finite(strength), *low_args)
    if bounds.size < 2:
        return pieces, fragments
    use_sustained = sustained is not None
    if offset[0] != 0 or offset[1] != 0:  # raster indices, rounded once (crossings.window_to_raster)
        pt_r, pt_c = _window_to_raster(pt_r, pt_c, field, float(offset[0]), float(offset[1]))
    out = _select(pt_r, pt_c, verts, bounds, s_pt, keep_pt, float(high), use_sustained,
                  float(sustained) if use_sustained else 0.0, float(sustained_length_px), 0.0, 0.0,
                  float(core.row0), float(core.col0), float(core.row1), float(core.col1))
    p_r, p_c, p_s, p_b, f_r, f_c, f_s, f_b, f_so, f_eo = out
    for k in range(p_b.size - 1):
        a, b = p_b[k], p_b[k + 1]
        pieces.append((p_r[a:b], p_c[a:b], p_s[a:b]))
    for k in range(f_b.size - 1):
        a, b = f_b[k], f_b[k + 1]
        fragments.append(Fragment(f_r[a:b], f_c[a:b], f_s[a:b], bool(f_so[k]), bool(f_eo[k])))
    return pieces, fragments
