"""Pictures: the rasteriser against geometry worked by hand, the preview PNG (size, content, every
color mode), the error histogram, and the `preview` command."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import globemill
from globemill.preview import (
    COLOR_MODES,
    chunk_colors,
    error_histogram_png,
    linear_to_srgb,
    parse_size,
    rasterize,
    srgb_to_linear,
    view_frame,
    view_levels,
    write_preview,
)

pytest.importorskip("matplotlib")
from matplotlib.image import imread  # noqa: E402  (after the skip: an optional extra)

DEMO = Path(__file__).resolve().parents[1] / "examples" / "pebblemoor.toml"
BACKGROUND = np.array([0x11, 0x15, 0x1C]) / 255.0


@pytest.fixture(scope="module")
def baked() -> globemill.BakeResult:
    return globemill.bake(globemill.load_spec(DEMO), tolerance_m=4.0)


# ---- the rasteriser ------------------------------------------------------------------------


def square(z: float = 0.0, half: float = 0.5) -> tuple[np.ndarray, np.ndarray]:
    """A square [-half, half]^2 at depth z facing +Z, as two counter-clockwise triangles."""
    p = np.array([[-half, -half, z], [half, -half, z], [half, half, z], [-half, half, z]])
    return p, np.array([[0, 1, 2], [0, 2, 3]])


def test_two_triangles_sharing_an_edge_cover_every_pixel_once() -> None:
    # edge functions with closed triangles (Pineda 1988): the 64 x 64 pixel centres inside the
    # square are all covered, none twice, none outside (the square spans [16, 48) in pixels)
    p, t = square()
    d, right, up = view_frame("front")
    ras = rasterize(p, t, d, right, up, size=64, extent=1.0)
    covered = ras.tri >= 0
    assert covered.sum() == 32 * 32
    assert covered[16:48, 16:48].all()
    np.testing.assert_allclose(ras.bary.sum(axis=2)[covered], 1.0, atol=1e-6)


def test_a_triangle_covers_its_area_in_pixels() -> None:
    # pixel count of a large triangle ~ its area in pixels (error bounded by its perimeter)
    p = np.array([[-0.9, -0.8, 0.0], [0.7, -0.6, 0.0], [0.1, 0.9, 0.0]])
    d, right, up = view_frame("front")
    size = 400
    ras = rasterize(p, np.array([[0, 1, 2]]), d, right, up, size=size, extent=1.0)
    s = size / 2.0
    q = p[:, :2] * s
    e1, e2 = q[1] - q[0], q[2] - q[0]
    area = 0.5 * abs(e1[0] * e2[1] - e1[1] * e2[0])
    perim = sum(np.linalg.norm(q[i] - q[(i + 1) % 3]) for i in range(3))
    assert abs((ras.tri >= 0).sum() - area) <= perim


def test_the_nearer_surface_wins_and_back_faces_are_culled() -> None:
    near, t = square(z=0.5, half=0.3)
    far, _ = square(z=-0.5, half=0.6)
    pos = np.concatenate([near, far])
    tri = np.concatenate([t, t + 4])
    d, right, up = view_frame("front")
    ras = rasterize(pos, tri, d, right, up, size=50, extent=1.0)
    assert set(np.unique(ras.tri[25, 25:27]).tolist()) <= {0, 1}  # the near square
    # pixels [10, 40) hold the far square, [17, 32) the near one in front of it
    assert set(np.unique(ras.tri[25, 11:16]).tolist()) <= {2, 3}  # only the far one there
    assert (ras.tri[25, :9] < 0).all()
    # seen from behind, both squares face away: nothing is drawn
    d, right, up = view_frame("back")
    assert (rasterize(pos, tri, d, right, up, size=50, extent=1.0).tri < 0).all()


def test_srgb_transfer_round_trips() -> None:
    # IEC 61966-2-1: 0.5 linear is 0.7354 in sRGB (value from the published curve)
    assert linear_to_srgb(0.5) == pytest.approx(0.7354, abs=1e-4)
    c = np.linspace(0, 1, 101)
    np.testing.assert_allclose(srgb_to_linear(linear_to_srgb(c)), c, atol=1e-12)


# ---- what is drawn -----------------------------------------------------------------------------


def test_neighbouring_chunks_get_different_colors(baked: globemill.BakeResult) -> None:
    col = chunk_colors(baked.chunk_neighbors)
    for c, nb in enumerate(baked.chunk_neighbors):
        assert all(col[c] != col[int(n)] for n in nb)
    assert len(set(col.tolist())) >= 4


def test_level_picture_keeps_neighbours_within_one_level(baked: globemill.BakeResult) -> None:
    # stitched seams join a chunk only to a neighbour one level coarser
    for view in ("front", "north", "-30,45"):
        lev = view_levels(baked, view)
        nb = baked.chunk_neighbors.astype(int)
        assert np.abs(lev[:, None] - lev[nb]).max() <= 1
        assert lev.min() == 0 and lev.max() >= 1


# ---- the picture -------------------------------------------------------------------------------


def image_checks(path: Path, size: tuple[int, int]) -> np.ndarray:
    img = imread(path)
    assert img.shape[:2] == (size[1], size[0])  # rows = height
    rgb = img[:, :, :3]
    # not blank: far from the background in a good share of the picture, and many colors
    away = np.abs(rgb - BACKGROUND).max(axis=2) > 0.1
    assert away.mean() > 0.2
    assert len(np.unique((rgb * 255).astype(np.uint8).reshape(-1, 3), axis=0)) > 200
    return rgb


@pytest.mark.parametrize("color", COLOR_MODES)
def test_preview_png_of_the_requested_size(
    baked: globemill.BakeResult, color: str, tmp_path: Path
) -> None:
    size = (720, 300)
    out = tmp_path / f"{color}.png"
    stats = write_preview(baked, out, color=color, size=size, views=("front", "back"))
    rgb = image_checks(out, size)
    assert stats.size == size and stats.triangles > 0
    # the middle of each view shows the world, not the background
    assert [p.name for p in tmp_path.iterdir()] == [out.name]  # atomic: no temporaries left
    assert np.abs(rgb[size[1] // 2, size[0] // 4] - BACKGROUND).max() > 0.05


def test_layer_picture_shows_the_layer_colors(baked: globemill.BakeResult, tmp_path: Path) -> None:
    out = tmp_path / "layers.png"
    write_preview(baked, out, color="layer", size=(600, 300), views=("north",))
    rgb = imread(out)[:, :, :3].reshape(-1, 3).astype(np.float64)
    # the demo's most common layer color appears (shaded: same hue, some brightness)
    counts = np.bincount(
        globemill.attributes.vertex_attributes(baked.spec, baked.directions).layer, minlength=256
    )
    top = baked.spec.layers[int(np.argmax(counts[:255]))].color
    ref = linear_to_srgb(np.array(top))
    hue = ref / np.linalg.norm(ref)
    cos = (rgb @ hue) / np.maximum(np.linalg.norm(rgb, axis=1), 1e-9)
    assert (cos > 0.995).mean() > 0.05


def test_bad_options_are_refused(baked: globemill.BakeResult, tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="color"):
        write_preview(baked, tmp_path / "x.png", color="rainbow")
    with pytest.raises(ValueError, match="level"):
        write_preview(baked, tmp_path / "x.png", level=len(baked.levels))
    with pytest.raises(ValueError, match="view"):
        write_preview(baked, tmp_path / "x.png", views=("sideways",))
    with pytest.raises(ValueError, match="size"):
        parse_size("10x10")
    with pytest.raises(ValueError, match="size"):
        parse_size("wide")
    assert parse_size("1600x640") == (1600, 640)
    assert not list(tmp_path.iterdir())


def test_error_histogram_png(tmp_path: Path) -> None:
    rng = np.random.default_rng(3)
    errors = rng.uniform(0, 0.5, 5000) ** 2
    out = error_histogram_png(errors, 0.2, tmp_path / "hist.png", size=(640, 360))
    img = imread(out)
    assert img.shape[:2] == (360, 640)
    # white page with dark bars and the red tolerance line drawn on it
    rgb = img[:, :, :3]
    assert (np.abs(rgb - [1, 1, 1]).max(axis=2) > 0.3).mean() > 0.02
    red = (rgb[:, :, 0] > 0.6) & (rgb[:, :, 1] < 0.35) & (rgb[:, :, 2] < 0.35)
    assert red.sum() > 50
    # an empty set of errors still gives a picture
    error_histogram_png([], 0.2, tmp_path / "empty.png")
    assert (tmp_path / "empty.png").stat().st_size > 0


def test_preview_command(tmp_path: Path) -> None:
    out = tmp_path / "world.png"
    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "globemill",
            "preview",
            str(DEMO),
            "-o",
            str(out),
            "--tolerance-m",
            "6",
            "--color",
            "chunk",
            "--size",
            "500x240",
            "--views",
            "front/20,60",
        ],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert res.returncode == 0, res.stderr
    assert "wrote" in res.stdout
    image_checks(out, (500, 240))
    bad = subprocess.run(
        [sys.executable, "-m", "globemill", "preview", str(DEMO), "-o", str(out), "--size", "9"],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert bad.returncode == 2 and "size" in bad.stderr  # documented: 2 = bad input


def test_every_documented_example_parses() -> None:
    # the examples printed by --help must be valid command lines (views split as documented)
    import shlex

    from globemill.cli import EPILOG, build_parser

    parser = build_parser()
    lines = [ln.strip() for ln in EPILOG.splitlines() if ln.strip().startswith("globemill ")]
    assert any(" preview " in ln for ln in lines)
    for line in lines:
        argv = shlex.split(line.split(">")[0])[1:]
        args = parser.parse_args(argv)
        if args.command == "preview":
            parse_size(args.size)
            for v in args.views.split("/"):
                view_frame(v)


# ---- pictures of a finished bake, from its files ------------------------------------------------


@pytest.fixture(scope="module")
def bake_dir(baked: globemill.BakeResult, tmp_path_factory: pytest.TempPathFactory) -> Path:
    from globemill.output import write_outputs

    out = tmp_path_factory.mktemp("bake")
    write_outputs(baked, out)
    return out


def test_a_finished_bake_is_drawn_like_the_bake_in_memory(
    baked: globemill.BakeResult, bake_dir: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from globemill import preview

    size = (600, 300)
    write_preview(baked, tmp_path / "mem.png", color="altitude", size=size, views=("front",))
    # drawing the files must not bake: any call into the core's bake would fail here
    monkeypatch.setattr(globemill._core, "bake", lambda *a, **k: pytest.fail("baked again"))
    stats = preview.write_preview(
        bake_dir, tmp_path / "files.png", color="altitude", size=size, views=("front",)
    )
    assert stats.triangles == baked.report["lods"][0]["triangles"]
    a = image_checks(tmp_path / "mem.png", size)
    b = image_checks(tmp_path / "files.png", size)
    # float32 positions in the file move a few edge pixels at most
    assert np.mean(np.abs(a - b).max(axis=2) > 0.05) < 0.01


def test_altitude_and_slope_colors_follow_the_ground(bake_dir: Path, tmp_path: Path) -> None:
    from matplotlib import colormaps

    from globemill.preview import read_ground

    g = read_ground(bake_dir)
    # attributes read back are the bake's own (the report's ranges hold them)
    assert len(g.altitude_m) == len(g.positions) and g.slope_deg.min() >= 0.0
    size = (400, 400)
    # looking straight down on the highest vertex: the middle pixel has cividis' top color
    top = g.positions[int(np.argmax(g.altitude_m))]
    lat = np.degrees(np.arcsin(top[1] / np.linalg.norm(top)))
    lon = np.degrees(np.arctan2(top[0], top[2]))
    view = f"{lat:.4f},{lon:.4f}"
    out = tmp_path / "alt.png"
    write_preview(bake_dir, out, color="altitude", size=size, views=(view,), grid_deg=0,
                       names=False)  # fmt: skip
    img = imread(out)[:, :, :3]
    # the globe is the largest lit blob (not the title, the color bar or the view's label)
    from scipy import ndimage

    blobs, n = ndimage.label(np.abs(img - BACKGROUND).max(axis=2) > 0.1)
    biggest = 1 + int(np.argmax(ndimage.sum(np.ones_like(blobs), blobs, range(1, n + 1))))
    rows, cols = np.nonzero(blobs == biggest)
    mid = (round(rows.mean()), round(cols.mean()))
    got = img[mid[0] - 1 : mid[0] + 2, mid[1] - 1 : mid[1] + 2].reshape(-1, 3).mean(axis=0)
    # cividis runs from blue (low) to yellow (high): red above blue at the top, below it on the
    # low ground that covers most of the world
    top_rgb, low_rgb = colormaps["cividis"](1.0), colormaps["cividis"](0.3)
    assert top_rgb[0] > top_rgb[2] and low_rgb[0] < low_rgb[2]
    assert got[0] - got[2] > 0.05
    ground = img[blobs == biggest]
    assert np.median(ground[:, 0] - ground[:, 2]) < 0


def test_grid_and_names_are_drawn(bake_dir: Path, tmp_path: Path) -> None:
    from globemill.preview import GRID_RGB, linear_to_srgb

    size = (500, 500)
    plain, grid = tmp_path / "plain.png", tmp_path / "grid.png"
    kw = {"color": "slope", "size": size, "views": ("front",), "names": False}
    write_preview(bake_dir, plain, grid_deg=0, **kw)
    write_preview(bake_dir, grid, grid_deg=30, **kw)
    a, b = imread(plain)[:, :, :3], imread(grid)[:, :, :3]
    changed = np.abs(a - b).max(axis=2) > 0.05
    # the equator of the front view (latitude 0) is a horizontal line through the view's middle
    rows = np.nonzero(changed.any(axis=1))[0]
    assert changed.mean() > 0.005
    light = linear_to_srgb(GRID_RGB)
    assert (np.abs(b[changed] - light).max(axis=1) < 0.45).mean() > 0.5
    # 7 lines of latitude cross the middle column (-90..90 every 30°, poles excluded: 5) and
    # meridians cross the middle row: both directions show up
    assert len(rows) > 50
    named = tmp_path / "named.png"
    write_preview(bake_dir, named, grid_deg=0, color="slope", size=size, views=("front",))
    assert np.abs(imread(named)[:, :, :3] - a).max() > 0.3  # text drawn


def test_jpeg_output_and_bad_suffix(bake_dir: Path, tmp_path: Path) -> None:
    from PIL import Image

    out = tmp_path / "p.jpg"
    write_preview(bake_dir, out, size=(320, 160), views=("front",))
    with Image.open(out) as im:
        assert im.format == "JPEG" and im.size == (320, 160)
    with pytest.raises(ValueError, match="gif"):
        write_preview(bake_dir, tmp_path / "p.gif", size=(320, 160))
    with pytest.raises(ValueError, match="color"):
        write_preview(bake_dir, tmp_path / "p.png", color="error")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p.jpg"]


def test_preview_command_draws_a_bake_folder(bake_dir: Path, tmp_path: Path) -> None:
    out = tmp_path / "b.png"
    cmd = [sys.executable, "-m", "globemill", "preview", str(bake_dir), "-o", str(out)]
    res = subprocess.run(
        [*cmd, "--color", "chunk", "--size", "400x200"], capture_output=True, text=True, timeout=600
    )
    assert res.returncode == 0, res.stderr
    image_checks(out, (400, 200))
    res = subprocess.run([*cmd, "--color", "level"], capture_output=True, text=True, timeout=600)
    assert res.returncode == 2 and "level" in res.stderr
