"""Raster-scale benchmark: `nutricap estimate` on a synthetic landscape of about N cells.

    python benchmarks/raster_scale.py --cells 40000000

Builds once (cached in benchmarks/.cache/, git-ignored) a landscape invented for the benchmark:
a square grid of 30 m cells (EPSG:32612) with 6 forage-class biomass rasters [kg/ha] and a
snow-depth raster [cm] (float32, tiled 512 × 512, DEFLATE, as written by GDAL's defaults for
a compressed tiled GeoTIFF), 200 management units (Voronoi cells of random points) and 4
vegetation strata. Then measures, in this order:

(a) the read floor: every raster read once, window by window, with rasterio in one thread
    (the same windows and GDAL settings as nutricap; a first untimed read warms the page
    cache, so every timed step reads from memory);
(b) `nutricap estimate` on it (report included), in a child process (wall time, interpreter
    start included); its peak RSS is read with resource.getrusage(RUSAGE_CHILDREN) right
    after the estimate runs, before any other child runs, so the data building here does not
    count;
(b') the same estimate with ``--no-figures`` (the report without its PNG and SVG files);
(f) the fresh-memory floor: writing as many bytes as the cell cache between the two passes
    holds (4 + 4 × classes per cell) into a new temporary file and removing it (on some
    virtual machines a page touched for the first time costs far more than the copy);
(c) per-unit class sums of the 6 forage rasters by exactextract (`exact_extract(..., "sum")`),
    in a child process as well (wall time, interpreter start included).

Each is run ``--repeat`` times (default 3) and the fastest run is kept, since the machine
may be shared. The last line printed is exactly
``cells=N ratio_to_read_floor=R ratio_to_exactextract=E peak_rss_mb=M
no_figures_ratio_to_read_floor=R' no_figures_ratio_to_exactextract=E'`` (one line) with
R = (b)/(a), E = (b)/(c), M the peak RSS of (b) [MB], and R', E' the same for (b').

With ``--mosaic`` the landscape of ``--cells`` cells is a GDAL VRT mosaic (one VRTDataset per
layer, a SimpleSource per tile) of k × k copies of the cached landscape of ``--tile-cells``
cells (default 1e8: no new raster data is written), with 2,000 units and the strata drawn
anew over the whole mosaic. Then (a) the read floor of the mosaic, (b) `nutricap estimate` on
this machine's threads and (d) the same estimate on a Dask LocalCluster of two worker
processes (``[rasters] dask_scheduler``); exactextract is not run. The last line is then
``cells=N mosaic_tiles=K ratio_to_read_floor=R peak_rss_mb=M cluster_s=S equal=yes|no``,
``equal`` saying whether the two estimates' tables and density rasters are the same to the
last byte. Check on a tiny size first: ``--cells 4000000 --tile-cells 1000000 --repeat 1``.
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import rasterio
import shapely
from rasterio.transform import from_origin
from rasterio.windows import Window

from nutricap.landscape.grid.rasters import grid_windows, read_grid, streaming_env

ROOT = Path(__file__).resolve().parent
CACHE = ROOT / ".cache"
SEED = 20260415
CRS = "EPSG:32612"
CELL_M = 30.0
WEST, NORTH = 400_000.0, 5_000_000.0
CLASSES = ("sagebrush", "bitterbrush", "mahogany", "rabbitbrush", "wheatgrass", "forbs")
HEIGHTS_CM = (60, 90, 150, 50, 40, 10)  # invented for the benchmark
N_UNITS = 200
STRATA = ("steppe", "shrubland", "woodland", "meadow")
BLOCK = 512
CELL_CACHE_BYTES = 4 + 4 * len(CLASSES)  # the cell cache's record: key, forage left per class
FORAGE_TABLE = """forage_class,growth_form,de_kcal_per_g,cp_pct,allowable_use,key,height_cm
sagebrush,browse,2.75,10.5,0.5,true,60
bitterbrush,browse,2.45,8.0,0.5,true,90
mahogany,browse,2.35,8.5,0.5,false,150
rabbitbrush,browse,2.30,7.0,0.4,false,50
wheatgrass,grass,2.10,4.5,0.4,false,40
forbs,forb,2.60,10.0,0.5,false,10
"""
PROJECT = """# Invented for the benchmark.
[project]
name = "Raster-scale benchmark (invented)"
species = "mule deer"
season = "winter"
season_days = 120

[inputs]
forage_classes = "forage_classes.csv"
plots = "plots.csv"
animal_classes = "animals.csv"
units = "units.gpkg"
strata = "strata.gpkg"

[target]
diet_de_min_kcal_per_g = 2.4

[rasters]
biomass = { BIOMASS }

[availability]
snow_depth = "snow_depth.tif"
"""


def layer_names() -> list[str]:
    return [*CLASSES, "snow_depth"]


def build(folder: Path, cells: int) -> None:
    """Write the invented landscape into ``folder`` (skipped when complete)."""
    done = folder / "COMPLETE"
    if done.exists():
        return
    folder.mkdir(parents=True, exist_ok=True)
    side = int(round(np.sqrt(cells)))
    transform = from_origin(WEST, NORTH, CELL_M, CELL_M)
    rng = np.random.default_rng(SEED)
    for number, name in enumerate(layer_names()):
        started = time.perf_counter()
        _write_layer(folder / f"{name}.tif", side, transform, number, rng)
        print(f"built {name}.tif in {time.perf_counter() - started:.1f} s", file=sys.stderr)
    _write_vectors(folder, (side, side), rng)
    _write_tables(folder, rng)
    done.write_text("ok\n")


def _write_layer(path: Path, side: int, transform, number: int, rng) -> None:
    profile = {
        "driver": "GTiff",
        "width": side,
        "height": side,
        "count": 1,
        "dtype": "float32",
        "crs": CRS,
        "transform": transform,
        "tiled": True,
        "blockxsize": BLOCK,
        "blockysize": BLOCK,
        "compress": "deflate",
        "nodata": -9999.0,
        "bigtiff": "IF_SAFER",
    }
    with rasterio.open(path, "w", **profile) as dst:
        for row0 in range(0, side, BLOCK):
            rows = min(BLOCK, side - row0)
            y = np.arange(row0, row0 + rows, dtype=np.float32)[:, None] / side
            x = np.arange(side, dtype=np.float32)[None, :] / side
            if number < len(CLASSES):
                wave = np.sin(6.0 * x + number) * np.cos(5.0 * y - number)
                values = 150.0 + 120.0 * wave + rng.normal(0.0, 25.0, (rows, side))
                values = np.maximum(values, 0.0)
                if number == 0:  # a lake without data, invented
                    lake = (x - 0.3) ** 2 + (y - 0.6) ** 2 < 0.002
                    values = np.where(lake, -9999.0, values)
            else:
                values = np.maximum(80.0 * y + 10.0 * np.sin(9.0 * x), 0.0) + 0.0 * x
            dst.write(values.astype(np.float32), 1, window=Window(0, row0, side, rows))


def _voronoi(points: np.ndarray, frame) -> np.ndarray:
    diagram = shapely.voronoi_polygons(shapely.multipoints(points), extend_to=frame)
    return shapely.intersection(shapely.get_parts(diagram), frame)


def _write_vectors(
    folder: Path,
    shape: tuple[int, int],
    rng,
    n_units: int = N_UNITS,
    tile_side: int | None = None,
) -> None:
    """Units and strata over a grid of ``shape`` = (rows, columns) cells."""
    east, south = WEST + shape[1] * CELL_M, NORTH - shape[0] * CELL_M
    frame = shapely.box(WEST, south, east, NORTH)
    inner = shapely.box(WEST + 45.0, south + 45.0, east - 45.0, NORTH - 45.0)

    def random_points(n):
        return np.column_stack([rng.uniform(WEST, east, n), rng.uniform(south, NORTH, n)])

    seeds = random_points(n_units)
    if tile_side is not None:  # no seed in a tile's lake: every unit holds cells with data
        seeds = seeds[~_in_lake(seeds, tile_side)]
        while seeds.shape[0] < n_units:
            more = random_points(n_units)
            seeds = np.vstack([seeds, more[~_in_lake(more, tile_side)]])[:n_units]
    units = shapely.intersection(_voronoi(seeds, frame), inner)
    gpd.GeoDataFrame(
        {"unit_id": [f"U{i:03d}" for i in range(len(units))]}, geometry=units, crs=CRS
    ).to_file(folder / "units.gpkg", driver="GPKG")
    patches = _voronoi(random_points(12), frame)
    names = np.array(STRATA)[np.arange(len(patches)) % len(STRATA)]
    strata = gpd.GeoDataFrame({"stratum": names}, geometry=patches, crs=CRS)
    strata.dissolve("stratum").reset_index().to_file(folder / "strata.gpkg", driver="GPKG")


def _in_lake(points: np.ndarray, tile_side: int) -> np.ndarray:
    """Points within the lake of their mosaic tile (see _write_layer), with a margin."""
    tile_m = tile_side * CELL_M
    x = ((points[:, 0] - WEST) % tile_m) / tile_m
    y = ((NORTH - points[:, 1]) % tile_m) / tile_m
    return (x - 0.3) ** 2 + (y - 0.6) ** 2 < 0.003


def _write_tables(folder: Path, rng, suffix: str = ".tif") -> None:
    (folder / "forage_classes.csv").write_text(FORAGE_TABLE)
    (folder / "animals.csv").write_text("animal_class,body_mass_kg,share,state\n"
                                        "doe,65,1.0,maintenance\n")  # fmt: skip
    rows = [
        (f"{stratum[:2]}{plot}", stratum, name, round(float(rng.uniform(20, 300)), 1))
        for stratum in STRATA
        for plot in range(3)
        for name in CLASSES
    ]
    pd.DataFrame(rows, columns=["plot_id", "stratum", "forage_class", "biomass_kg_per_ha"]).to_csv(
        folder / "plots.csv", index=False
    )
    biomass = ", ".join(f'{name} = "{name}{suffix}"' for name in CLASSES)
    text = PROJECT.replace("BIOMASS", biomass).replace("snow_depth.tif", f"snow_depth{suffix}")
    (folder / "project.toml").write_text(text)


def read_floor(folder: Path, suffix: str = ".tif") -> float:
    """Seconds to read every raster once, window by window, in one thread."""
    paths = [folder / f"{name}{suffix}" for name in layer_names()]
    windows = grid_windows(read_grid(paths[0], "grid"))
    started = time.perf_counter()
    with streaming_env():
        for path in paths:
            with rasterio.open(path) as src:
                for window in windows:
                    src.read(1, window=window)
    return time.perf_counter() - started


def write_floor(cells: int, bytes_per_cell: int = CELL_CACHE_BYTES) -> float:
    """Seconds to write ``cells × bytes_per_cell`` bytes (what the cell cache between the two
    passes holds) into a new file of the temporary folder, 16 MiB at a time, and remove it:
    the cost of fresh page-cache memory on this machine (on some virtual machines the first
    touch of a page is far slower than the copy)."""
    block = np.ones(16 * 2**20 // 4, dtype=np.float32)
    total = cells * bytes_per_cell
    started = time.perf_counter()
    with tempfile.TemporaryFile() as handle:
        for offset in range(0, total, block.nbytes):
            os.pwrite(handle.fileno(), block[: (total - offset) // 4], offset)
    return time.perf_counter() - started


def run_estimate(folder: Path, project: str = "project.toml", out_name: str = "out", *extra: str):
    """Wall seconds and peak RSS [MB] of `nutricap estimate` in a child process."""
    out = folder.parent / out_name
    command = [sys.executable, "-m", "nutricap", "estimate", str(folder / project)]
    command += ["--out", str(out), "--overwrite", "--quiet", *extra]
    started = time.perf_counter()
    subprocess.run(command, check=True, stdout=subprocess.DEVNULL)
    seconds = time.perf_counter() - started
    peak_kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss  # kB on Linux
    return seconds, peak_kb / 1024.0


EXACTEXTRACT = """
import sys, time
import geopandas as gpd
from exactextract import exact_extract
folder = sys.argv[1]
names = sys.argv[2:]
units = gpd.read_file(folder + "/units.gpkg")
started = time.perf_counter()
sums = exact_extract([f"{folder}/{n}.tif" for n in names], units, ["sum"],
                     include_cols=["unit_id"], output="pandas")
print(f"{time.perf_counter() - started:.3f}", sums.shape[0])
"""


def run_exactextract(folder: Path) -> tuple[float, str]:
    """Wall seconds of exactextract's per-unit sums in a child process, and its own report."""
    command = [sys.executable, "-c", EXACTEXTRACT, str(folder), *CLASSES]
    started = time.perf_counter()
    done = subprocess.run(command, check=True, capture_output=True, text=True)
    return time.perf_counter() - started, done.stdout.strip()


MOSAIC_UNITS = 2_000


def mosaic_layout(cells: int, tile_cells: int) -> tuple[int, int]:
    """(rows, columns) of tiles: round(cells / tile_cells) tiles, the factor pair nearest a
    square (10 tiles → 2 × 5, 9 → 3 × 3)."""
    count = max(1, int(round(cells / tile_cells)))
    rows = max(r for r in range(1, int(np.sqrt(count)) + 1) if count % r == 0)
    return rows, count // rows


def build_mosaic(folder: Path, cells: int, tile_cells: int) -> tuple[int, int]:
    """Write the VRT mosaic of rows × columns copies of the cached ``tile_cells`` landscape
    into ``folder`` (vectors and tables drawn anew over its extent); return the layout."""
    tile_folder = CACHE / f"cells_{tile_cells}" / "inputs"
    build(tile_folder, tile_cells)
    layout = mosaic_layout(cells, tile_cells)
    if (folder / "COMPLETE").exists():
        return layout
    folder.mkdir(parents=True, exist_ok=True)
    for name in layer_names():
        write_vrt_mosaic(tile_folder / f"{name}.tif", folder / f"{name}.vrt", layout)
    with rasterio.open(folder / f"{CLASSES[0]}.vrt") as src:
        shape = (src.height, src.width)
    rng = np.random.default_rng(SEED + 1)
    _write_vectors(folder, shape, rng, n_units=MOSAIC_UNITS, tile_side=shape[0] // layout[0])
    _write_tables(folder, rng, suffix=".vrt")
    (folder / "COMPLETE").write_text("ok\n")
    return layout


def write_vrt_mosaic(tile: Path, path: Path, layout: tuple[int, int]) -> None:
    """A GDAL VRTDataset (gdal.org/drivers/raster/vrt.html) of ``layout`` = (rows, columns)
    copies of the GeoTIFF ``tile`` side by side, one SimpleSource each, with its blocks and
    nodata."""
    tile_rows, tile_cols = layout
    with rasterio.open(tile) as src:
        width, height, t = src.width, src.height, src.transform
        block_rows, block_cols = src.block_shapes[0]
        nodata, wkt = src.nodata, src.crs.to_wkt()
    sources = [
        f'<SimpleSource><SourceFilename relativeToVRT="0">{tile}</SourceFilename>'
        f"<SourceBand>1</SourceBand>"
        f'<SrcRect xOff="0" yOff="0" xSize="{width}" ySize="{height}"/>'
        f'<DstRect xOff="{col * width}" yOff="{row * height}" xSize="{width}" '
        f'ySize="{height}"/></SimpleSource>'
        for row in range(tile_rows)
        for col in range(tile_cols)
    ]
    nodata_xml = "" if nodata is None else f"<NoDataValue>{nodata!r}</NoDataValue>"
    path.write_text(
        f'<VRTDataset rasterXSize="{tile_cols * width}" rasterYSize="{tile_rows * height}">\n'
        f"<SRS>{wkt}</SRS>\n"
        f"<GeoTransform>{t.c!r}, {t.a!r}, 0.0, {t.f!r}, 0.0, {t.e!r}</GeoTransform>\n"
        f'<VRTRasterBand dataType="Float32" band="1" blockXSize="{block_cols}" '
        f'blockYSize="{block_rows}">{nodata_xml}\n' + "\n".join(sources) + "\n"
        "</VRTRasterBand>\n</VRTDataset>\n"
    )


def run_mosaic(args) -> None:
    """The --mosaic measurements: read floor, estimate on threads and on a LocalCluster."""
    from distributed import LocalCluster

    folder = CACHE / f"mosaic_{args.cells}_of_{args.tile_cells}" / "inputs"
    tile_rows, tile_cols = build_mosaic(folder, args.cells, args.tile_cells)
    with rasterio.open(folder / f"{CLASSES[0]}.vrt") as src:
        cells = src.width * src.height
    load = os.getloadavg()[0]
    read_floor(folder, ".vrt")  # warm the page cache
    floor = min(read_floor(folder, ".vrt") for _ in range(args.repeat))
    estimate_s, _ = min(run_estimate(folder) for _ in range(args.repeat))
    peak_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
    with LocalCluster(n_workers=2, threads_per_worker=1, dashboard_address=None) as cluster:
        text = (folder / "project.toml").read_text()
        text = text.replace(
            "[rasters]\n", f'[rasters]\ndask_scheduler = "{cluster.scheduler_address}"\n'
        )
        (folder / "project_cluster.toml").write_text(text)
        cluster_s, _ = run_estimate(folder, "project_cluster.toml", "out_cluster")
    local, remote = folder.parent / "out", folder.parent / "out_cluster"
    names = ("capacity_by_unit.csv", "availability_rules.csv", "capacity_density.tif")
    equal = all((local / n).read_bytes() == (remote / n).read_bytes() for n in names)
    print(
        f"mosaic of {tile_rows} x {tile_cols} tiles of {args.tile_cells:,} cells = "
        f"{cells:,} cells, "
        f"{MOSAIC_UNITS} units; read floor {floor:.2f} s; estimate {estimate_s:.2f} s on threads "
        f"(best of {args.repeat}), {cluster_s:.2f} s on a LocalCluster of 2 worker processes; "
        f"1-min load before {load:.2f}, after {os.getloadavg()[0]:.2f}",
        file=sys.stderr,
    )
    print(
        f"cells={cells} mosaic_tiles={tile_rows * tile_cols} "
        f"ratio_to_read_floor={estimate_s / floor:.2f} "
        f"peak_rss_mb={peak_mb:.0f} cluster_s={cluster_s:.2f} equal={'yes' if equal else 'no'}"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, required=True, help="about how many cells")
    parser.add_argument("--repeat", type=int, default=3, help="runs of each step (fastest kept)")
    parser.add_argument(
        "--mosaic", action="store_true", help="a VRT mosaic of tiles of a cached landscape"
    )
    parser.add_argument(
        "--tile-cells", type=int, default=100_000_000, help="cells of each mosaic tile"
    )
    args = parser.parse_args()
    if args.mosaic:
        run_mosaic(args)
        return
    folder = CACHE / f"cells_{args.cells}" / "inputs"
    build(folder, args.cells)
    side = int(round(np.sqrt(args.cells)))
    load = os.getloadavg()[0]
    read_floor(folder)  # warm the page cache
    floor = min(read_floor(folder) for _ in range(args.repeat))
    estimate_s, peak_mb = min(run_estimate(folder) for _ in range(args.repeat))
    peak_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
    plain_s, _ = min(
        run_estimate(folder, "project.toml", "out", "--no-figures") for _ in range(args.repeat)
    )
    fresh = min(write_floor(side * side) for _ in range(args.repeat))
    extract_s, extract_report = min(run_exactextract(folder) for _ in range(args.repeat))
    print(
        f"grid {side} x {side} = {side * side:,} cells; read floor {floor:.2f} s; fresh-memory "
        f"floor {fresh:.2f} s; estimate {estimate_s:.2f} s ({plain_s:.2f} s with "
        f"--no-figures); exactextract {extract_s:.2f} s (its own timer, units: "
        f"{extract_report}); best of {args.repeat}; 1-min load before the run {load:.2f}, "
        f"after {os.getloadavg()[0]:.2f}",
        file=sys.stderr,
    )
    print(
        f"cells={args.cells} ratio_to_read_floor={estimate_s / floor:.2f} "
        f"ratio_to_exactextract={estimate_s / extract_s:.2f} peak_rss_mb={peak_mb:.0f} "
        f"no_figures_ratio_to_read_floor={plain_s / floor:.2f} "
        f"no_figures_ratio_to_exactextract={plain_s / extract_s:.2f}"
    )


if __name__ == "__main__":
    main()
