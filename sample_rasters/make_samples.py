"""Write the bundled sample rasters and their truth lines.

Run from anywhere as ``python sample_rasters/make_samples.py``.  The scenes
are invented: seeded fractal terrain with hand-placed scarps, valleys and
ridges, and a seeded patchwork of agricultural fields with drains (see
``lineament/synthetic.py``).  The script is deterministic: running it again
rewrites the same rasters and vector layers (GeoPackage files carry a
modification timestamp, so their bytes may differ).

Files written beside this script:

* ``dem_faulted.tif`` and ``dem_faulted_truth.gpkg``
* ``dem_plain.tif`` (no planted features)
* ``fields_r0c0.tif``, ``fields_r0c1.tif``, ``fields_r1c0.tif``,
  ``fields_r1c1.tif`` (2 x 2 tiles of one image) and ``fields_truth.gpkg``
"""

from __future__ import annotations

import sys
from pathlib import Path

import fiona
import numpy as np
import rasterio
from affine import Affine
from rasterio.enums import ColorInterp

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from lineament.synthetic import (  # noqa: E402
    TruthLine,
    fields_image,
    fractal_terrain,
    north_up_transform,
    plant_ridge,
    plant_scarp,
    plant_valley,
    void_mask,
)

CRS = "EPSG:32633"  # WGS 84 / UTM zone 33N
NODATA = -9999.0

# ----------------------------------------------------------------- faulted DEM
DEM_SHAPE = (1024, 1024)
DEM_PIXEL_M = 10.0
DEM_UPPER_LEFT = (500_000.0, 5_200_000.0)
TERRAIN_SEED = 3
DEM_NOISE_SEED = 20240611
VOID_SEED = 20240612
BASE_ELEVATION_M = 500.0
RELIEF_M = 40.0
SPECTRAL_EXPONENT = 3.3  # a little above 3: smoother hillslopes at the 10-50 m scale
NOISE_M = 0.3
#: Heights are rounded to multiples of 1/64 m (1.6 cm), far below the 0.3 m
#: noise, so the float32 mantissa has trailing zero bits and DEFLATE with the
#: floating-point predictor keeps the file small.
QUANTUM_M = 1.0 / 64.0

# Planted features: kind, start and end in km from the lower-left corner of
# the DEM (x east, y north), amplitude (scarp offset, valley depth, ridge
# height) in m and width in m.  Scarps raise the left side (looking from
# start to end).  Scarps 1 and 2 cross near their middles; ridge 12 crosses
# scarp 4; valley 7 crosses nothing.
FEATURES_KM = [
    ("scarp", (1.2, 2.2), (6.2, 4.6), 25.0, 15.0),
    ("scarp", (3.4, 6.6), (4.6, 1.6), 18.0, 20.0),
    ("scarp", (6.5, 9.2), (9.4, 6.8), 15.0, 10.0),
    ("scarp", (7.2, 0.8), (9.2, 4.2), 30.0, 30.0),
    ("scarp", (0.6, 8.0), (3.4, 8.6), 14.0, 12.0),
    ("scarp", (0.8, 3.8), (0.9, 6.9), 20.0, 18.0),
    ("valley", (5.2, 5.4), (8.6, 5.8), 20.0, 60.0),
    ("valley", (1.5, 9.6), (5.5, 9.0), 18.0, 40.0),
    ("valley", (5.0, 2.8), (6.6, 0.6), 14.0, 30.0),
    ("valley", (2.0, 5.0), (2.9, 7.4), 30.0, 80.0),
    ("ridge", (3.8, 7.2), (5.6, 8.6), 10.0, 20.0),
    ("ridge", (6.6, 3.4), (9.8, 2.2), 8.0, 15.0),
]
TAPER_FRACTION = 0.05
#: Void centres in km from the lower-left corner (outlines drawn with
#: ``VOID_SEED``).  The first sits on the axis of valley 7 (feature_id 7) so that a
#: feature runs into nodata; the others are at least 600 m from any feature.
VOIDS_KM = [(6.9, 5.72), (9.6, 9.6), (1.0, 0.9)]
VOID_RADIUS_PX = (15.0, 22.0)

# ------------------------------------------------------------------- plain DEM
PLAIN_SHAPE = (512, 512)
PLAIN_UPPER_LEFT = (530_000.0, 5_180_000.0)
PLAIN_NOISE_SEED = 77031

# ---------------------------------------------------------------- fields scene
FIELDS_SHAPE = (768, 768)
FIELDS_PIXEL_M = 0.5
FIELDS_UPPER_LEFT = (506_000.0, 5_194_000.0)
FIELDS_SEED = 4
FIELDS_TILE = 384


def dem_transform(upper_left, pixel_m=DEM_PIXEL_M) -> Affine:
    return north_up_transform(upper_left, pixel_m)


def map_to_index(transform: Affine, x: float, y: float) -> tuple[float, float]:
    """Fractional (row, col) of a map point on a north-up grid; pixel corners at integers."""
    return (y - transform.f) / transform.e, (x - transform.c) / transform.a


def km_to_map(point_km, shape=DEM_SHAPE, upper_left=DEM_UPPER_LEFT, pixel_m=DEM_PIXEL_M):
    """Kilometres from the lower-left DEM corner to map coordinates."""
    x0, y_top = upper_left
    y_bottom = y_top - shape[0] * pixel_m
    return (x0 + 1000.0 * point_km[0], y_bottom + 1000.0 * point_km[1])


def terrain_pair() -> tuple[np.ndarray, np.ndarray]:
    """Featureless terrain for the faulted DEM (1024 x 1024) and the plain DEM (512 x 512).

    Both come from one 1024 x 2048 fractal surface: the faulted DEM takes the
    left half, the plain DEM the centre of the right half.  A power-law
    surface's standard deviation is dominated by its few longest
    wavelengths and varies a lot between seeds, so rescaling two separately
    drawn surfaces to the same standard deviation would give them different
    roughness at the scales a detector sees.  Two disjoint parts of one
    surface share the same spectrum.  The whole is scaled so that the left
    half has a standard deviation of exactly ``RELIEF_M``.
    """
    rows, cols = DEM_SHAPE
    surface = fractal_terrain(
        (rows, 2 * cols),
        pixel_size_m=DEM_PIXEL_M,
        relief_m=RELIEF_M,
        spectral_exponent=SPECTRAL_EXPONENT,
        seed=TERRAIN_SEED,
    )
    faulted = surface[:, :cols]
    surface = surface * np.float32(RELIEF_M / float(faulted.std()))
    r0 = (rows - PLAIN_SHAPE[0]) // 2
    c0 = cols + (cols - PLAIN_SHAPE[1]) // 2
    return surface[:, :cols].copy(), surface[r0 : r0 + PLAIN_SHAPE[0], c0 : c0 + PLAIN_SHAPE[1]].copy()


def faulted_dem(terrain: np.ndarray) -> tuple[np.ndarray, list[TruthLine], np.ndarray]:
    """Heights (float32, metres, voids as NODATA), truth lines and void mask."""
    transform = dem_transform(DEM_UPPER_LEFT)
    dem = terrain
    truth: list[TruthLine] = []
    for kind, a_km, b_km, amplitude, width in FEATURES_KM:
        a, b = km_to_map(a_km), km_to_map(b_km)
        if kind == "scarp":
            dem = plant_scarp(dem, transform, a, b, offset_m=amplitude, width_m=width, taper_fraction=TAPER_FRACTION)
        elif kind == "valley":
            dem = plant_valley(dem, transform, a, b, depth_m=amplitude, width_m=width, taper_fraction=TAPER_FRACTION)
        else:
            dem = plant_ridge(dem, transform, a, b, height_m=amplitude, width_m=width, taper_fraction=TAPER_FRACTION)
        truth.append(TruthLine(kind, a, b, width, amplitude))
    rng = np.random.default_rng(DEM_NOISE_SEED)
    dem = dem + BASE_ELEVATION_M + rng.normal(0.0, NOISE_M, DEM_SHAPE)
    dem = np.round(dem / QUANTUM_M) * QUANTUM_M
    centers_rc = []
    for p_km in VOIDS_KM:
        x, y = km_to_map(p_km)
        row, col = map_to_index(transform, x, y)
        centers_rc.append((row - 0.5, col - 0.5))
    voids = void_mask(DEM_SHAPE, seed=VOID_SEED, centers_rc=centers_rc, radius_px=VOID_RADIUS_PX)
    dem = np.where(voids, NODATA, dem).astype(np.float32)
    return dem, truth, voids


def plain_dem(terrain: np.ndarray) -> np.ndarray:
    """Featureless terrain plus base elevation and its own white noise, float32."""
    rng = np.random.default_rng(PLAIN_NOISE_SEED)
    dem = terrain + BASE_ELEVATION_M + rng.normal(0.0, NOISE_M, terrain.shape)
    return (np.round(dem / QUANTUM_M) * QUANTUM_M).astype(np.float32)


def _distance_to_segment(x, y, line: TruthLine):
    (sx, sy), (ex, ey) = line.start_xy, line.end_xy
    dx, dy = ex - sx, ey - sy
    t = np.clip(((x - sx) * dx + (y - sy) * dy) / (dx * dx + dy * dy), 0.0, 1.0)
    return np.hypot(x - (sx + t * dx), y - (sy + t * dy))


def check_voids(voids: np.ndarray, truth: list[TruthLine]) -> None:
    """The first void touches feature 7 (a valley axis), the others stay clear."""
    from scipy import ndimage

    transform = dem_transform(DEM_UPPER_LEFT)
    labels, n = ndimage.label(voids)
    if n != len(VOIDS_KM):
        raise SystemExit(f"make_samples.py: expected {len(VOIDS_KM)} separate voids, got {n}")
    for index, p_km in enumerate(VOIDS_KM):
        x, y = km_to_map(p_km)
        row, col = map_to_index(transform, x, y)
        lab = labels[int(row), int(col)]
        rr, cc = np.nonzero(labels == lab)
        px = transform.a * (cc + 0.5) + transform.c
        py = transform.e * (rr + 0.5) + transform.f
        nearest = [float(_distance_to_segment(px, py, line).min()) for line in truth]
        if index == 0:
            if nearest[6] > 0.5 * DEM_PIXEL_M:
                raise SystemExit("make_samples.py: the first void does not reach the axis of valley 7")
        elif min(nearest) < 600.0:
            raise SystemExit(f"make_samples.py: void {index + 1} lies within 600 m of a planted feature")


def check_crossings(truth: list[TruthLine]) -> None:
    """Scarps 1 and 2 cross each other."""
    from shapely.geometry import LineString

    a, b = (LineString([t.start_xy, t.end_xy]) for t in truth[:2])
    if not a.crosses(b):
        raise SystemExit("make_samples.py: scarps 1 and 2 do not cross")


def write_dem(path: Path, dem: np.ndarray, transform: Affine) -> None:
    profile = {
        "driver": "GTiff",
        "width": dem.shape[1],
        "height": dem.shape[0],
        "count": 1,
        "dtype": "float32",
        "crs": CRS,
        "transform": transform,
        "nodata": NODATA,
        "compress": "deflate",
        "predictor": 3,
        "zlevel": 9,
        "tiled": True,
        "blockxsize": 256,
        "blockysize": 256,
    }
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(dem, 1)
        dst.set_band_description(1, "elevation_m")
        dst.update_tags(1, UNITTYPE="m")
        dst.update_tags(
            SCENE="invented; written by sample_rasters/make_samples.py (seeded)",
        )


def write_truth(path: Path, truth: list[TruthLine], *, with_amplitude: bool) -> None:
    properties = {"feature_id": "int", "kind": "str", "width_m": "float"}
    if with_amplitude:
        properties["amplitude_m"] = "float"
    properties.update({"length_m": "float", "azimuth_deg": "float"})
    schema = {"geometry": "LineString", "properties": properties}
    if path.exists():
        path.unlink()
    with fiona.open(path, "w", driver="GPKG", crs=CRS, schema=schema, layer=path.stem) as dst:
        for feature_id, line in enumerate(truth, start=1):
            props = {"feature_id": feature_id, "kind": line.kind, "width_m": round(line.width_m, 4)}
            if with_amplitude:
                props["amplitude_m"] = line.amplitude_m
            props["length_m"] = round(line.length_m, 3)
            props["azimuth_deg"] = round(line.azimuth_deg, 3)
            dst.write(
                {
                    "geometry": {"type": "LineString", "coordinates": [line.start_xy, line.end_xy]},
                    "properties": props,
                }
            )


def write_fields(directory: Path) -> list[TruthLine]:
    image, truth = fields_image(
        FIELDS_SHAPE, pixel_size_m=FIELDS_PIXEL_M, seed=FIELDS_SEED, upper_left_xy=FIELDS_UPPER_LEFT
    )
    transform = north_up_transform(FIELDS_UPPER_LEFT, FIELDS_PIXEL_M)
    for tile_row in range(FIELDS_SHAPE[0] // FIELDS_TILE):
        for tile_col in range(FIELDS_SHAPE[1] // FIELDS_TILE):
            r0, c0 = tile_row * FIELDS_TILE, tile_col * FIELDS_TILE
            tile = image[:, r0 : r0 + FIELDS_TILE, c0 : c0 + FIELDS_TILE]
            profile = {
                "driver": "GTiff",
                "width": FIELDS_TILE,
                "height": FIELDS_TILE,
                "count": 3,
                "dtype": "uint8",
                "crs": CRS,
                "transform": north_up_transform(
                    (transform.c + c0 * FIELDS_PIXEL_M, transform.f - r0 * FIELDS_PIXEL_M), FIELDS_PIXEL_M
                ),
                "photometric": "RGB",
                "interleave": "pixel",
                "compress": "deflate",
                "predictor": 2,
                "zlevel": 9,
                "tiled": True,
                "blockxsize": 128,
                "blockysize": 128,
            }
            with rasterio.open(directory / f"fields_r{tile_row}c{tile_col}.tif", "w", **profile) as dst:
                dst.write(tile)
                dst.colorinterp = [ColorInterp.red, ColorInterp.green, ColorInterp.blue]
                dst.update_tags(SCENE="invented; written by sample_rasters/make_samples.py (seeded)")
    return truth


def check_fields_seams(truth: list[TruthLine]) -> tuple[int, int]:
    """Count drains and field boundaries that cross a tile seam; require 2 and 4."""
    x0, y0 = FIELDS_UPPER_LEFT
    seam_x = x0 + FIELDS_TILE * FIELDS_PIXEL_M
    seam_y = y0 - FIELDS_TILE * FIELDS_PIXEL_M

    def crosses(line: TruthLine) -> bool:
        (ax, ay), (bx, by) = line.start_xy, line.end_xy
        return (ax - seam_x) * (bx - seam_x) < 0 or (ay - seam_y) * (by - seam_y) < 0

    drains = sum(crosses(t) for t in truth if t.kind == "drain")
    boundaries = sum(crosses(t) for t in truth if t.kind == "field_boundary")
    if drains < 2 or boundaries < 4:
        raise SystemExit(
            f"make_samples.py: only {drains} drains and {boundaries} field boundaries cross a tile seam"
        )
    return drains, boundaries


def main() -> None:
    terrain, plain_terrain = terrain_pair()
    dem, truth, voids = faulted_dem(terrain)
    check_crossings(truth)
    check_voids(voids, truth)
    write_dem(HERE / "dem_faulted.tif", dem, dem_transform(DEM_UPPER_LEFT))
    write_truth(HERE / "dem_faulted_truth.gpkg", truth, with_amplitude=True)
    write_dem(HERE / "dem_plain.tif", plain_dem(plain_terrain), dem_transform(PLAIN_UPPER_LEFT))
    fields_truth = write_fields(HERE)
    drains, boundaries = check_fields_seams(fields_truth)
    write_truth(HERE / "fields_truth.gpkg", fields_truth, with_amplitude=False)

    print(f"planted {len(truth)} DEM features, {int(voids.sum())} void pixels")
    print(
        f"fields: {sum(t.kind == 'drain' for t in fields_truth)} drains, "
        f"{sum(t.kind == 'field_boundary' for t in fields_truth)} field boundaries; "
        f"{drains} drains and {boundaries} boundaries cross a tile seam"
    )
    total = 0
    for path in sorted(HERE.iterdir()):
        if path.suffix in (".tif", ".gpkg"):
            size = path.stat().st_size
            total += size
            print(f"{path.name:28s} {size / 1e6:7.3f} MB")
    print(f"{'total':28s} {total / 1e6:7.3f} MB")


if __name__ == "__main__":
    main()
