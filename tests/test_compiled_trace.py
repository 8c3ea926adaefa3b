"""Compiled zero-crossing tracer against the scikit-image based reference.

Every check compares with something outside the compiled code:
``skimage.measure.find_contours`` (directly, or through
``lineament.crossings.trace_level_set_reference``, which traces with it and
applies the rule in Python), or NumPy's own reductions.  Traces are compared
piece by piece and fragment by fragment whatever the order of the lists
(see ``_by_first_vertex``).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from skimage.measure import find_contours

from lineament import _compiled_trace as ct
from lineament.crossings import (
    MAD_TO_SIGMA,
    Core,
    keep_run,
    sample_cubic,
    stitch_fragments,
    strength_map,
    trace_level_set_reference,
)
from lineament.scalespace import log_response
from lineament.synthetic import fractal_terrain


def _by_first_vertex(items, get):
    # Order-independent comparison: the reference lists pieces and fragments contour by contour,
    # the compiled tracer in the order it finds runs (it never assembles whole contours), so both
    # lists are sorted by first vertex, then length and all vertices, and compared item by item.
    # Each item must be identical: the same vertices in the same direction, the same strengths
    # and open flags.
    return sorted(items, key=lambda it: (get(it)[0][0], get(it)[1][0], get(it)[0].size,
                                         tuple(get(it)[0]), tuple(get(it)[1])))


def _assert_same_pieces(ref, out):
    assert len(out) == len(ref)
    for (rr, rc, rs), (orr, oc, os_) in zip(_by_first_vertex(ref, lambda p: p), _by_first_vertex(out, lambda p: p)):
        assert orr.dtype == np.float64 and oc.dtype == np.float64 and os_.dtype == np.float32
        assert np.array_equal(orr, rr) and np.array_equal(oc, rc)
        assert np.array_equal(os_, rs)


def _assert_same_fragments(ref, out):
    assert len(out) == len(ref)
    get = lambda f: (f.rows, f.cols)  # noqa: E731
    for fr, fo in zip(_by_first_vertex(ref, get), _by_first_vertex(out, get)):
        assert np.array_equal(fo.rows, fr.rows) and np.array_equal(fo.cols, fr.cols)
        assert np.array_equal(fo.strength, fr.strength)
        assert fo.strength.dtype == np.float32
        assert (fo.start_open, fo.end_open) == (fr.start_open, fr.end_open)


def _assert_same_trace(field, strength, usable, **kw):
    # Reference: lineament.crossings.trace_level_set_reference (skimage find_contours + Python rule).
    ref = trace_level_set_reference(field, strength, usable, **kw)
    out = ct.trace_compiled(field, strength, usable, **kw)
    _assert_same_pieces(ref[0], out[0])
    _assert_same_fragments(ref[1], out[1])
    return ref


def _assert_same_contours(field):
    # Reference: skimage.measure.find_contours(field, 0.0) with its defaults.
    ref = find_contours(field, 0.0)
    out = ct.level_contours(field)
    assert len(out) == len(ref)
    for a, b in zip(ref, out):
        assert b.shape == a.shape and np.array_equal(b, a)


def _ring(n=24, radius=6.0, centre=(11.3, 12.6)):
    r, c = np.mgrid[0:n, 0:n].astype(np.float64)
    return (np.hypot(r - centre[0], c - centre[1]) - radius).astype(np.float32)


# ------------------------------------------------------------------------------------------ contours


HAND_MADE = {
    "ring": _ring(),
    "saddle low": np.array([[1, -1], [-1, 1]], np.float32),
    "saddle high": np.array([[-1, 1], [1, -1]], np.float32),
    "chequer": np.where((np.add.outer(np.arange(7), np.arange(9)) % 2) == 0, 1.0, -1.0).astype(np.float32),
    "touches border": (np.arange(12)[None, :] - 4.3 + 0.2 * np.arange(10)[:, None]).astype(np.float32),
    "all positive": np.ones((6, 7), np.float32),
    "all zero": np.zeros((6, 7), np.float32),
    "zeros on centres": np.array([[0, 0, 1, 0], [0, 1, 1, 0], [-1, 0, 0, 0], [0, 0, -1, 2]], np.float32),
    "flat patch": np.pad(np.zeros((4, 4), np.float32), 3, constant_values=1.0),
    "tiny against huge": np.array([[1e-30, -1, 1e-30], [-1e30, 1e-38, -1], [2, -1e-45, 3]], np.float32),
    "float64": np.random.default_rng(3).standard_normal((9, 11)),
}


@pytest.mark.parametrize("name", sorted(HAND_MADE))
def test_contours_match_find_contours(name):
    # Reference: skimage find_contours(field, 0.0).
    _assert_same_contours(HAND_MADE[name])


def test_contours_with_nan_cells_match_find_contours():
    # Reference: skimage find_contours, which skips every cell with a NaN corner (its docs: NaN is
    # excluded from the considered region).
    f = np.random.default_rng(5).standard_normal((12, 13)).astype(np.float32)
    f[4, 6] = np.nan
    f[0, 0] = np.nan
    _assert_same_contours(f)


def test_both_assembly_paths_match_find_contours():
    # The successor-map path (no vertex on a pixel centre) and the replayed dictionary assembly
    # (any field) must each give find_contours' output.
    rng = np.random.default_rng(11)
    generic = rng.standard_normal((40, 37)).astype(np.float32)
    ok, pr, pc, verts, bounds = ct._contours_chains(generic, ct._CASE_SEGMENTS)
    assert ok
    for pt_r, pt_c, v, b in ((pr, pc, verts, bounds), ct._contours(generic)):
        got = [np.stack([pt_r[v[b[k]:b[k + 1]]], pt_c[v[b[k]:b[k + 1]]]], axis=1) for k in range(b.size - 1)]
        ref = find_contours(generic, 0.0)
        assert len(got) == len(ref) and all(np.array_equal(g, r) for g, r in zip(got, ref))
    ok, *_ = ct._contours_chains(HAND_MADE["zeros on centres"], ct._CASE_SEGMENTS)
    assert not ok  # vertices on pixel centres: handled by the replayed assembly


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(shape=st.tuples(st.integers(2, 12), st.integers(2, 12)), seed=st.integers(0, 2**32 - 1),
       kind=st.sampled_from(["normal", "small integers", "extremes"]))
def test_random_contours_match_find_contours(shape, seed, kind):
    # Reference: skimage find_contours(field, 0.0).
    rng = np.random.default_rng(seed)
    if kind == "normal":
        f = rng.standard_normal(shape).astype(np.float32)
    elif kind == "small integers":  # many exact zeros: vertices on pixel centres, contours meeting there
        f = rng.integers(-2, 3, shape).astype(np.float32)
    else:  # rounding puts vertices on pixel centres without exact zeros
        f = (rng.integers(-1, 2, shape) * rng.choice([1e-30, 1.0, 1e30, 1e-45], shape)).astype(np.float32)
    _assert_same_contours(f)


# ------------------------------------------------------------------------------------------ NumPy parts


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_pairwise_sum_is_numpys(dtype):
    # Reference: np.add.reduce (NumPy's pairwise summation), bit for bit.
    rng = np.random.default_rng(2)
    for n in list(range(1, 300)) + [1000, 8192, 8193, 20000]:
        a = (rng.random(n) * rng.choice([1e-3, 1.0, 1e3], n)).astype(dtype)
        assert ct._pairwise_sum(a, 0, n) == np.add.reduce(a)


def test_edge_sampling_is_sample_cubic():
    # Reference: lineament.crossings.sample_cubic (NumPy, 36 taps) at vertices on pixel edges.
    rng = np.random.default_rng(4)
    img = rng.random((9, 10)).astype(np.float32)
    img[2, 3] = 0.0
    rows = np.concatenate([rng.integers(0, 9, 50) + 0.0, rng.random(50) * 8])
    cols = np.concatenate([rng.random(50) * 9, rng.integers(0, 10, 50) + 0.0])
    ref = sample_cubic(img, rows, cols)
    got = np.array([ct._sample_on_edge(img, r, c) for r, c in zip(rows, cols)])
    assert np.array_equal(got, ref)
    assert np.array_equal(np.signbit(got), np.signbit(ref))


# ------------------------------------------------------------------------------------------ whole trace


def _log_field(n, sigma=2.0, seed=7):
    z = fractal_terrain((n, n), pixel_size_m=10.0, relief_m=40.0, spectral_exponent=3.3, seed=seed)
    z = z.astype(np.float32)
    resp = log_response(z, sigma, (1.0, 1.0))
    s, gx, gy = strength_map(resp, sigma, (1.0, 1.0))
    comps = np.concatenate([gx.ravel()[::7], gy.ravel()[::7]]).astype(np.float64)
    noise = MAD_TO_SIGMA * np.median(np.abs(comps - np.median(comps))) * np.sqrt(2 * np.pi) * sigma
    usable = np.zeros(z.shape, bool)
    m = int(3 * sigma) + 1
    usable[m:-m, m:-m] = True
    # thresholds as in benchmarks/bench_speed.py
    kw = dict(high=4 * noise, low=2 * noise, sustained=3 * noise, sustained_length_px=8 * sigma)
    return resp, s, usable, kw


def test_log_response_of_terrain_matches_reference():
    # Reference: trace_level_set_reference on a LoG response of fractal terrain, thresholds of the
    # speed benchmark.
    resp, s, usable, kw = _log_field(384)
    ref = _assert_same_trace(resp, s, usable, **kw)
    assert len(ref[0]) > 10  # the comparison covers real pieces


def test_log_response_tiles_with_offset_and_core_match_reference():
    # Reference: trace_level_set_reference on a window with an offset and a smaller core.
    resp, s, usable, kw = _log_field(256, seed=3)
    # a window of the raster that owns a smaller core; runs leaving the core become fragments
    r0, c0 = 40, 70
    win = (slice(r0, r0 + 120), slice(c0, c0 + 110))
    core = Core(r0 + 15, c0 + 20, r0 + 100, c0 + 95)
    ref = _assert_same_trace(resp[win], s[win], usable[win], offset=(r0, c0), core=core, **kw)
    assert len(ref[1]) > 0 and len(ref[0]) > 0


def test_fragments_stitched_and_ruled_match_reference():
    # Two windows sharing an edge: the fragments of both, joined by stitch_fragments and passed
    # through keep_run, are the same runs as the reference's.
    resp, s, usable, kw = _log_field(192, seed=7)
    frags_ref, frags_out = [], []
    for cols in ((0, 110), (90, 192)):
        win = (slice(0, 192), slice(*cols))
        core = Core(0, cols[0] + (10 if cols[0] else 0), 192, cols[1] - (10 if cols[1] < 192 else 0))
        args = (resp[win], s[win], usable[win])
        frags_ref += trace_level_set_reference(*args, offset=(0, cols[0]), core=core, **kw)[1]
        frags_out += ct.trace_compiled(*args, offset=(0, cols[0]), core=core, **kw)[1]
    rule = dict(high=kw["high"], sustained=kw["sustained"], sustained_length_px=kw["sustained_length_px"])
    joined_ref = [j for j in stitch_fragments(frags_ref) if keep_run(j[0], j[1], j[2], **rule)]
    joined_out = [j for j in stitch_fragments(frags_out) if keep_run(j[0], j[1], j[2], **rule)]
    assert len(joined_ref) > 0
    _assert_same_pieces([j[:3] for j in joined_ref], [j[:3] for j in joined_out])
    assert sorted(j[3] for j in joined_out) == sorted(j[3] for j in joined_ref)


def test_ring_kept_whole_and_canonical():
    # Reference: trace_level_set_reference (find_contours + canonical_ring); one ring, all strong.
    f = _ring()
    s = np.full(f.shape, 5.0, np.float32)
    usable = np.ones(f.shape, bool)
    ref = _assert_same_trace(f, s, usable, high=4.0, low=1.0)
    assert len(ref[0]) == 1


def test_ring_with_hole_in_mask_and_allowed_matches_reference():
    # Reference: trace_level_set_reference, with seeds, with an allowed mask, and by the sustained rule.
    f = _ring(30, 9.0, (14.2, 15.1))
    s = np.linspace(0.5, 6.0, f.size, dtype=np.float32).reshape(f.shape)
    usable = np.ones(f.shape, bool)
    usable[10:16, 3:9] = False  # hole cuts the ring into an arc (a run wrapping past index 0)
    allowed = np.ones(f.shape, bool)
    allowed[20:, 20:] = False
    _assert_same_trace(f, s, usable, high=4.0, low=1.0)
    _assert_same_trace(f, s, usable, high=4.0, low=1.0, allowed=allowed)
    _assert_same_trace(f, s, usable, high=40.0, low=1.0, sustained=2.0, sustained_length_px=5.0)


@pytest.mark.parametrize("name", ["saddle low", "chequer", "touches border", "all positive", "all zero",
                                  "zeros on centres", "flat patch", "float64"])
def test_hand_made_fields_match_reference(name):
    # Reference: trace_level_set_reference; ``low`` as a Python float, NumPy float64 and float32
    # (NumPy compares float32 strengths with them in float32, float64 and float32).
    f = HAND_MADE[name]
    s = (np.abs(np.random.default_rng(1).standard_normal(f.shape)) * 3).astype(np.float32)
    usable = np.ones(f.shape, bool)
    for low in (0.5, np.float64(0.5), np.float32(0.5)):
        _assert_same_trace(f, s, usable, high=2.0, low=low, sustained=1.0, sustained_length_px=1.5)


def test_empty_mask_and_tiny_window():
    f = _ring()
    # Reference behaviour of trace_level_set_reference: nothing traced without a usable cell,
    # and find_contours refuses windows under 2 x 2.
    assert ct.trace_compiled(f, f, np.zeros(f.shape, bool), high=1.0, low=0.5) == ([], [])
    one = np.ones((1, 5), np.float32)
    with pytest.raises(ValueError):
        trace_level_set_reference(one, one, np.ones((1, 5), bool), high=1.0, low=0.5)
    with pytest.raises(ValueError):
        ct.trace_compiled(one, one, np.ones((1, 5), bool), high=1.0, low=0.5)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(shape=st.tuples(st.integers(2, 14), st.integers(2, 14)), seed=st.integers(0, 2**32 - 1),
       integers=st.booleans(), sustained=st.booleans(), tiled=st.booleans())
def test_random_fields_match_reference(shape, seed, integers, sustained, tiled):
    # Reference: trace_level_set_reference on random fields, masks, thresholds, offsets and cores.
    rng = np.random.default_rng(seed)
    if integers:
        f = rng.integers(-2, 3, shape).astype(np.float32)
    else:
        f = rng.standard_normal(shape).astype(np.float32)
    s = (rng.random(shape) * 4).astype(np.float32)
    usable = rng.random(shape) < 0.85
    allowed = rng.random(shape) < 0.9 if rng.random() < 0.5 else None
    kw = dict(high=float(rng.uniform(1.5, 4.0)), low=float(rng.uniform(0.0, 1.5)))
    if sustained:
        kw.update(sustained=float(rng.uniform(0.5, 2.0)), sustained_length_px=float(rng.uniform(1.0, 6.0)))
    if tiled:
        off = (int(rng.integers(0, 50)), int(rng.integers(0, 50)))
        core = Core(off[0] + int(rng.integers(0, 3)), off[1] + int(rng.integers(0, 3)),
                    off[0] + shape[0] - int(rng.integers(0, 3)), off[1] + shape[1] - int(rng.integers(0, 3)))
        kw.update(offset=off, core=core)
    _assert_same_trace(f, s, usable, allowed=allowed, **kw)


@pytest.mark.parametrize("n", [2, 3, 9, 130, 300])
def test_keep_run_thresholds_are_bit_exact(n):
    # Reference: lineament.crossings.keep_run (np.hypot, np.diff, .sum(), np.mean on float32).
    # Thresholds set exactly at the reference's path length and mean must keep the run; the next
    # float above either must drop it, so path and mean must agree to the last bit.
    rng = np.random.default_rng(n)
    rows = np.cumsum(rng.random(n)) + 10.0
    cols = np.cumsum(rng.random(n) - 0.5) + 20.0
    s = (rng.random(n) * 3).astype(np.float32)
    path = float(np.hypot(np.diff(rows), np.diff(cols)).sum())
    mean = float(np.mean(s))
    high = float(s.max()) + 1.0
    scratch = np.empty(n + 1)
    for sus, length in ((mean, path), (np.nextafter(mean, np.inf), path), (mean, np.nextafter(path, np.inf))):
        ref = keep_run(rows, cols, s, high=high, sustained=sus, sustained_length_px=length)
        assert ct._keep_run(rows, cols, s, n, high, True, sus, length, scratch) == ref
    assert keep_run(rows, cols, s, high=high, sustained=mean, sustained_length_px=path)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_every_vertex_strength_is_bit_exact(dtype, seed):
    # Reference: trace_level_set_reference (strengths from crossings.sample_cubic, clipped at 0,
    # float32).  With low = high = -1 every vertex is kept, so every contour comes back with the
    # strength of every vertex, including vertices next to the window's sides, where the compiled
    # code clamps taps and elsewhere reads them directly; they must agree to the last bit.
    rng = np.random.default_rng(seed)
    f = rng.standard_normal((9, 13)).astype(np.float32)
    s = (rng.random(f.shape) * 4 - 0.5).astype(dtype)
    usable = np.ones(f.shape, bool)
    ref = trace_level_set_reference(f, s, usable, high=-1.0, low=-1.0)
    out = ct.trace_compiled(f, s, usable, high=-1.0, low=-1.0)
    assert sum(p[0].size for p in ref[0]) > 40  # many vertices, some on every side
    assert len(out[0]) == len(ref[0])
    get = lambda p: p  # noqa: E731
    for (rr, rc, rs), (orr, oc, os_) in zip(_by_first_vertex(ref[0], get), _by_first_vertex(out[0], get)):
        assert np.array_equal(orr, rr) and np.array_equal(oc, rc)
        assert os_.dtype == rs.dtype == np.float32 and np.array_equal(os_, rs)


# ------------------------------------------------------------------------------------------ pruned assembly


def _terrain_window(shape, seed, sigma, bump):
    # Terrain-like surface: cumulative sums of seeded Gaussian noise (a random-walk surface), with an
    # optional steep Gaussian hill whose LoG response has strong closed zero crossings (rings).
    rng = np.random.default_rng(seed)
    z = np.cumsum(np.cumsum(rng.standard_normal(shape), axis=0), axis=1)
    if bump:
        r, c = np.mgrid[0:shape[0], 0:shape[1]]
        r0, c0 = rng.uniform(0.3, 0.7) * shape[0], rng.uniform(0.3, 0.7) * shape[1]
        z = z + 40.0 * z.std() * np.exp(-((r - r0) ** 2 + (c - c0) ** 2) / (2 * (2.5 * sigma) ** 2))
    resp = log_response(z.astype(np.float32), sigma, (1.0, 1.0))
    s, gx, gy = strength_map(resp, sigma, (1.0, 1.0))
    # robust noise level of the field itself, as the pipeline derives it (1.4826 * median |component|)
    comps = np.concatenate([gx.ravel(), gy.ravel()]).astype(np.float64)
    noise = MAD_TO_SIGMA * np.median(np.abs(comps)) * np.sqrt(2 * np.pi) * sigma
    return rng, resp, s, noise


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(shape=st.tuples(st.integers(12, 64), st.integers(12, 64)), seed=st.integers(0, 2**32 - 1),
       sigma=st.sampled_from([1.5, 2.0, 3.0]), bump=st.booleans(), tiled=st.booleans(),
       holes=st.booleans(), nan=st.sampled_from(["none", "field", "strength"]))
def test_realistic_thresholds_match_reference(shape, seed, sigma, bump, tiled, holes, nan):
    # Reference: trace_level_set_reference.  Thresholds are multiples of the field's own noise level
    # (the pipeline's defaults are low 2, sustained 3, high 4 times the noise), so most vertices are
    # weaker than ``low`` and the compiled tracer links only the passing ones; with rings (a steep
    # hill), masks with holes, an allowed mask, tiled windows (offset and core) and NaN.
    rng, resp, s, noise = _terrain_window(shape, seed, sigma, bump)
    a_low = float(rng.uniform(1.0, 3.0))
    kw = dict(low=a_low * noise, high=float(rng.uniform(a_low, 5.0)) * noise)
    if rng.random() < 0.7:
        kw.update(sustained=float(rng.uniform(a_low, 4.0)) * noise,
                  sustained_length_px=float(rng.uniform(2.0, 16.0)))
    usable = np.ones(shape, bool)
    m = int(rng.integers(0, 4))
    if m:
        usable[:m] = usable[-m:] = usable[:, :m] = usable[:, -m:] = False
    if holes:
        r0, c0 = int(rng.integers(0, shape[0] - 4)), int(rng.integers(0, shape[1] - 4))
        usable[r0:r0 + int(rng.integers(2, 8)), c0:c0 + int(rng.integers(2, 8))] = False
        kw["allowed"] = rng.random(shape) < 0.9
    if nan == "field":
        r0, c0 = int(rng.integers(0, shape[0] - 2)), int(rng.integers(0, shape[1] - 2))
        resp[r0:r0 + 2, c0:c0 + int(rng.integers(1, 4))] = np.nan
    elif nan == "strength":
        s[int(rng.integers(0, shape[0])), int(rng.integers(0, shape[1]))] = np.nan
    if tiled:
        off = (int(rng.integers(0, 500)), int(rng.integers(0, 500)))
        core = Core(off[0] + int(rng.integers(0, shape[0] // 2)), off[1] + int(rng.integers(0, shape[1] // 2)),
                    off[0] + shape[0] - int(rng.integers(0, shape[0] // 2)),
                    off[1] + shape[1] - int(rng.integers(0, shape[1] // 2)))
        kw.update(offset=off, core=core)
    _assert_same_trace(resp, s, usable, **kw)


def test_pruned_assembly_links_only_passing_vertices():
    # With the pipeline's default thresholds on a LoG response of terrain, most vertices are weaker
    # than ``low``: the pruned assembly gives points to a minority of them (the full level set,
    # skimage find_contours, has them all), and the trace is still the reference's.
    resp, s, usable, kw = _log_field(256, seed=5)
    low = kw["low"]
    ok, pt_r, pt_c, pt_s, verts, bounds = ct._strong_runs(resp, s, usable, np.float32(low), float(low),
                                                          False, ct._CASE_SEGMENTS)
    n_all = sum(c.shape[0] for c in find_contours(resp, 0.0))
    assert ok and 0 < pt_r.size < 0.5 * n_all
    assert np.all(pt_s >= np.float32(low))  # every linked vertex passes
    ref = _assert_same_trace(resp, s, usable, **kw)
    assert len(ref[0]) > 0


def test_ring_cut_by_the_core_gives_the_reference_fragments():
    # Reference: trace_level_set_reference.  A closed contour that passes everywhere is a ring; cut
    # by the core it becomes fragments that start at find_contours' start vertex of the ring, and a
    # weak stretch makes runs that wrap around that start.
    f = _ring(30, 9.0, (14.2, 15.1))
    usable = np.ones(f.shape, bool)
    strong = np.full(f.shape, 5.0, np.float32)
    ramp = np.linspace(0.5, 6.0, f.size, dtype=np.float32).reshape(f.shape)
    for s in (strong, ramp, ramp[::-1, ::-1].copy(), ramp.T.copy()):
        for core in (Core(100, 200, 114, 230), Core(100, 215, 130, 230), Core(108, 200, 130, 221)):
            ref = _assert_same_trace(f, s, usable, high=4.0, low=1.0, offset=(100, 200), core=core)
            assert len(ref[1]) > 0
    ref = _assert_same_trace(f, strong, usable, high=4.0, low=1.0, offset=(100, 200), core=Core(100, 200, 130, 230))
    assert len(ref[0]) == 1 and ref[0][0][0][0] == ref[0][0][0][-1]  # kept whole, closed


@pytest.mark.parametrize("seed", range(4))
def test_weak_vertices_on_pixel_centres_keep_the_pruned_assembly(seed):
    # Reference: trace_level_set_reference.  Exact zeros of the field put vertices on pixel centres,
    # where contours may meet.  When those vertices are weaker than ``low`` (strength 0 there) they
    # take no part in runs and the pruned assembly is used; when one passes, the whole level set is
    # assembled by the replayed find_contours assembly.  Both must give the reference's result.
    rng = np.random.default_rng(seed)
    f = rng.integers(-2, 3, (24, 27)).astype(np.float32)
    s = np.where(f == 0, 0.0, rng.uniform(1.0, 5.0, f.shape)).astype(np.float32)
    usable = np.ones(f.shape, bool)
    ok, *_ = ct._strong_runs(f, s, usable, np.float32(0.5), 0.5, False, ct._CASE_SEGMENTS)
    assert ok
    ref = _assert_same_trace(f, s, usable, high=3.0, low=0.5)
    assert len(ref[0]) > 0
    s_all = (s + 1.0).astype(np.float32)  # now the vertices on centres pass too
    ok, *_ = ct._strong_runs(f, s_all, usable, np.float32(0.5), 0.5, False, ct._CASE_SEGMENTS)
    assert not ok
    _assert_same_trace(f, s_all, usable, high=3.0, low=0.5)


def test_infinite_field_values_match_reference():
    # Reference: trace_level_set_reference.  Next to an infinite value a vertex lies on a pixel
    # centre or has NaN coordinates (inf / inf); the latter never pass.
    rng = np.random.default_rng(8)
    f = rng.standard_normal((16, 18)).astype(np.float32)
    f[3, 4] = np.inf
    f[7, 9] = -np.inf
    f[12, 2] = np.inf
    s = (rng.random(f.shape) * 4).astype(np.float32)
    usable = np.ones(f.shape, bool)
    with np.errstate(invalid="ignore"):
        ref = _assert_same_trace(f, s, usable, high=2.0, low=0.5)
    assert len(ref[0]) > 0
