"""The four-panel figure (metertop.plot, ``metertop plot``, ``analyse --plot``).

Every demo file is drawn and written; the figure object is checked panel by
panel against the analysis it shows, and the written file for its pixel
size and content. matplotlib is imported only when a figure is asked for:
a subprocess checks that ``import metertop`` and ``metertop analyse`` leave
it unloaded, and a blocked import checks the one-line install hint. The
tests need no display (figures use an Agg canvas, never pyplot).
"""

from __future__ import annotations

import json
import os
import struct
import subprocess
import sys

import numpy as np
import pytest
from typer.testing import CliRunner

import metertop
from metertop.cli import app
from metertop.errors import MetertopError, OutputError

from conftest import DEMO_DIR, REPO

plot = pytest.importorskip("metertop.plot")
pytest.importorskip("matplotlib")

DEMO_FILES = sorted(p for p in DEMO_DIR.iterdir() if p.suffix in (".mid", ".csv"))
PIXELS = (round(plot.FIGSIZE_IN[0] * plot.DPI), round(plot.FIGSIZE_IN[1] * plot.DPI))
runner = CliRunner()


def _run(*args):
    return runner.invoke(app, [str(a) for a in args], prog_name="metertop")


def _by_gid(ax, gid):
    found = [a for a in ax.get_children() if a.get_gid() == gid]
    assert len(found) == 1, f"expected one artist {gid!r} in {ax.get_title(loc='left')!r}, found {len(found)}"
    return found[0]


def _n_segments(artist) -> int:
    return len(artist.get_segments())


def _png_size(path) -> tuple[int, int]:
    """Width and height from the PNG header (IHDR; PNG specification, W3C/ISO 15948)."""
    data = path.read_bytes()[:24]
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", data[16:24])


def _near(rgb: np.ndarray, hex_colour: str, tol: float = 0.06) -> np.ndarray:
    target = np.array([int(hex_colour[k:k + 2], 16) for k in (1, 3, 5)]) / 255.0
    return np.all(np.abs(rgb - target) <= tol, axis=-1)


@pytest.fixture(scope="module")
def analyses():
    return {p.name: metertop.analyse_detailed(p) for p in DEMO_FILES}


def test_okabe_ito_palette():
    """The palette is Okabe & Ito's (2008, "Color Universal Design", jfly.uni-koeln.de/color): the published RGB values."""
    published = {"orange": (230, 159, 0), "sky_blue": (86, 180, 233), "bluish_green": (0, 158, 115), "yellow": (240, 228, 66),
                 "blue": (0, 114, 178), "vermillion": (213, 94, 0), "reddish_purple": (204, 121, 167), "black": (0, 0, 0)}
    for name, rgb in published.items():
        assert tuple(int(plot.PALETTE[name][k:k + 2], 16) for k in (1, 3, 5)) == rgb
    assert set(plot.LEVEL_COLOURS.values()) <= set(plot.PALETTE.values())


@pytest.mark.parametrize("path", DEMO_FILES, ids=lambda p: p.name)
def test_demo_figure(path, analyses, tmp_path):
    """Each demo file's figure: four titled panels, each drawing the analysis's own data; the PNG has the set size and is not blank."""
    a = analyses[path.name]
    r = a.result
    fig = plot.analysis_figure(a, title=path.name)
    assert len(fig.axes) == 4
    scan, bar, circles, strip = fig.axes
    title = fig.get_suptitle()
    assert path.name in title and r.time_signature in title and "bpm" in title
    for ax in fig.axes:
        assert ax.get_title(loc="left").strip()

    # 1: the pulse salience at every candidate period, the dominance at every scanned length, a mark per level.
    assert len(_by_gid(scan, "scan-pulse").get_xdata()) == len(a.pulse.candidates_s)
    assert _n_segments(_by_gid(scan, "scan-lattice")) == len(a.tree.cycles)
    assert scan.get_xscale() == "log" and "(s" in scan.get_xlabel()
    marked = [ln.get_xdata()[0] for ln in scan.get_lines() if ln.get_linestyle() == "--"]
    np.testing.assert_allclose(sorted(marked), sorted(lv.period_s for lv in r.levels))

    # 2: the wrapped density at bar length and one persistence bar per peak of its merge tree.
    cyc = a.tree.cycles[a.tree.best.bar]
    assert len(_by_gid(bar, "bar-density").get_xdata()) == cyc.n_bins + 2
    bars = _by_gid(bar, "bar-persistence").get_segments()
    assert len(bars) == len(cyc.diagram.peaks)
    heights = sorted(float(seg[1][1] - seg[0][1]) for seg in bars)
    np.testing.assert_allclose(heights, sorted(cyc.diagram.persistence), rtol=1e-9, atol=1e-12)
    shown_bar_s = float(bar.get_title(loc="left").split("(")[1].split(" s)")[0])
    assert shown_bar_s == pytest.approx(r.bar_s, rel=0.02)

    # 3: every event on both circles, sized by its accent.
    assert circles.name == "polar"
    for gid in ("circle-beat", "circle-bar"):
        dots = _by_gid(circles, gid)
        assert len(dots.get_offsets()) == r.n_events
        sizes = dots.get_sizes()
        assert np.argmax(sizes) == np.argmax(a.weights)

    # 4: the notes in the window, the proposed bar and beat lines within it.
    lo, hi = strip.get_xlim()
    kinds = [gid for gid in ("strip-drums", "strip-onsets", "strip-notes") if any(c.get_gid() == gid for c in strip.get_children())]
    assert kinds
    drawn = sum(len(_by_gid(strip, g).get_offsets()) if g != "strip-notes" else len(_by_gid(strip, g).get_paths()) for g in kinds)
    notes = a.notes
    assert drawn == int(((notes.onsets_s >= lo) & (notes.onsets_s <= hi)).sum()) > 0
    down = r.downbeats_s
    assert _n_segments(_by_gid(strip, "grid-downbeats")) == int(((down >= lo) & (down <= hi)).sum()) >= min(8, len(down))
    assert _n_segments(_by_gid(strip, "grid-beats")) == int(((r.beats_s >= lo) & (r.beats_s <= hi)).sum())
    assert strip.get_xlabel() == "time (s)"
    if path.name == "tidewater_deck_groove_4-4.mid":
        # The kick on the bottom row (common practice in drum notation), named
        # by the General MIDI percussion key map (note 36: Bass Drum 1).
        assert strip.get_yticklabels()[0].get_text() in ("Bass Drum 1", "Acoustic Bass Drum")

    out = plot.save_figure(fig, tmp_path / f"{path.stem}.png")
    assert out.exists() and _png_size(out) == PIXELS
    import matplotlib.image

    rgb = matplotlib.image.imread(str(out))[..., :3]
    assert rgb.shape[:2] == PIXELS[::-1]
    ink = np.mean(np.any(rgb < 0.9, axis=-1))
    assert 0.03 < ink < 0.6  # drawn on, and not one flood of colour
    for colour in (plot.LEVEL_COLOURS["bar"], plot.LEVEL_COLOURS["beat"]):
        assert _near(rgb, colour).sum() > 200


def test_svg_and_pdf(analyses, tmp_path):
    """The suffix picks the format: an SVG with the data artists' ids, and a PDF."""
    a = analyses["tidewater_lighthouse_steps_7-8.mid"]
    fig = plot.analysis_figure(a, title="steps")
    svg = plot.save_figure(fig, tmp_path / "steps.svg").read_text()
    assert svg.lstrip().startswith("<?xml") and "<svg" in svg and 'id="grid-downbeats"' in svg
    assert plot.save_figure(fig, tmp_path / "steps.pdf").read_bytes().startswith(b"%PDF-")


def test_notated_grid_drawn_beside(analyses):
    """A notated grid (here the demo's ground truth) is drawn in the strip with its own lines and legend entry."""
    path = DEMO_DIR / "tidewater_ferry_jig_6-8.mid"
    truth = json.loads(path.with_name(path.stem + ".truth.json").read_text())
    grid = plot.NotatedGrid(np.asarray(truth["downbeats_s"]), np.asarray(truth["beats_s"]), label="notated 6/8")
    fig = plot.analysis_figure(analyses[path.name], notated=grid)
    strip = fig.axes[3]
    lo, hi = strip.get_xlim()
    down = np.asarray(truth["downbeats_s"])
    assert _n_segments(_by_gid(strip, "notated-downbeats")) == int(((down >= lo) & (down <= hi)).sum()) > 0
    assert _n_segments(_by_gid(strip, "notated-beats")) > 0
    labels = [t.get_text() for t in strip.get_legend().get_texts()]
    assert "notated 6/8 bar lines" in labels and "proposed bar lines" in labels


def test_save_refuses_to_overwrite(analyses, tmp_path):
    """An existing file is kept unless force is given; an unknown suffix is refused."""
    fig = plot.analysis_figure(analyses["tidewater_pier_clapping_game_2-4.csv"])
    target = tmp_path / "fig.png"
    target.write_bytes(b"keep me")
    with pytest.raises(OutputError, match="exists; give --force"):
        plot.save_figure(fig, target)
    assert target.read_bytes() == b"keep me"
    plot.save_figure(fig, target, force=True)
    assert _png_size(target) == PIXELS
    with pytest.raises(OutputError, match="unknown figure format"):
        plot.save_figure(fig, tmp_path / "fig.gif")
    assert not (tmp_path / "fig.gif").exists()


def test_cli_plot_writes_and_refuses(tmp_path):
    """``metertop plot FILE -o OUT`` writes the PNG; again without --force it is refused with one line and exit 2; --force replaces it."""
    src = DEMO_DIR / "tidewater_pier_clapping_game_2-4.csv"
    out = tmp_path / "clap.png"
    res = _run("plot", src, "-o", out)
    assert res.exit_code == 0, res.stderr
    assert "2/4" in res.stdout and _png_size(out) == PIXELS
    before = out.read_bytes()
    again = _run("plot", src, "-o", out)
    assert again.exit_code == 2
    assert again.stderr.strip().count("\n") == 0 and "exists; give --force" in again.stderr
    assert out.read_bytes() == before
    assert _run("plot", src, "-o", out, "--force").exit_code == 0
    bad = _run("plot", src, "-o", tmp_path / "clap.gif")
    assert bad.exit_code == 2 and "unknown figure format" in bad.stderr


def test_cli_analyse_plot(tmp_path):
    """``analyse FILE --plot OUT`` prints the usual summary and writes the figure; with two files it is refused."""
    src = DEMO_DIR / "tidewater_pier_clapping_game_2-4.csv"
    out = tmp_path / "clap.svg"
    res = _run("analyse", src, "--plot", out)
    assert res.exit_code == 0, res.stderr
    assert "time signature 2/4" in res.stdout and "<svg" in out.read_text()
    refused = _run("analyse", src, "--plot", out)
    assert refused.exit_code == 2 and "exists" in refused.stderr and refused.stdout == ""
    two = _run("analyse", src, src, "--plot", tmp_path / "two.png")
    assert two.exit_code == 2 and not (tmp_path / "two.png").exists()
    js = _run("analyse", "--json", src, "--plot", tmp_path / "clap.png", "--force")
    assert js.exit_code == 0 and json.loads(js.stdout)["time_signature"] == "2/4"


def test_missing_matplotlib_gives_install_hint(monkeypatch, analyses, tmp_path):
    """With matplotlib unimportable, the library raises and the CLI prints one line naming ``pip install 'metertop[plot]'``, exit 2."""
    for name in [m for m in sys.modules if m == "matplotlib" or m.startswith("matplotlib.")]:
        monkeypatch.setitem(sys.modules, name, None)
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    with pytest.raises(MetertopError, match=r"pip install 'metertop\[plot\]'"):
        plot.analysis_figure(analyses["tidewater_pier_clapping_game_2-4.csv"])
    src = DEMO_DIR / "tidewater_pier_clapping_game_2-4.csv"
    for args in (("plot", src, "-o", tmp_path / "x.png"), ("analyse", src, "--plot", tmp_path / "x.png")):
        res = _run(*args)
        assert res.exit_code == 2
        assert res.stderr == "metertop: error: plots need matplotlib: pip install 'metertop[plot]'\n"
        assert not (tmp_path / "x.png").exists()


def test_matplotlib_not_imported_without_plot():
    """``import metertop`` (and metertop.plot) and ``metertop analyse`` without --plot load no matplotlib module."""
    code = (
        "import sys, metertop, metertop.plot\n"
        "from typer.testing import CliRunner\n"
        "from metertop.cli import app\n"
        f"res = CliRunner().invoke(app, ['analyse', {str(DEMO_DIR / 'tidewater_ferry_jig_6-8.mid')!r}])\n"
        "assert res.exit_code == 0, res.output\n"
        "res = CliRunner().invoke(app, ['analyse', '--json', "
        f"{str(DEMO_DIR / 'tidewater_pier_clapping_game_2-4.csv')!r}])\n"
        "assert res.exit_code == 0, res.output\n"
        "print(sorted(m for m in sys.modules if m.split('.')[0] == 'matplotlib'))\n"
    )
    env = dict(os.environ, PYTHONPATH=str(REPO))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, env=env)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "[]"


def test_check_plot_draws_the_notated_grid_beside_the_proposal(tmp_path, monkeypatch):
    """`metertop check FILE --plot OUT` puts the file's own (sequencer default 4/4) grid in panel 4 beside the proposed lines.

    The notated bar lines drawn must be pretty_midi's ``get_downbeats()`` of
    the file (the reference reader of its tempo map and time signatures)
    that fall inside the strip.
    """
    import pretty_midi

    import metertop.plot as mplot
    from metertop.cli import app

    drawn = {}
    real_save = mplot.save_figure

    def keep(fig, path, **kw):
        drawn["fig"] = fig
        return real_save(fig, path, **kw)

    monkeypatch.setattr(mplot, "save_figure", keep)
    src = DEMO_DIR / "tidewater_ferry_jig_6-8.mid"
    out = tmp_path / "check.png"
    res = CliRunner().invoke(app, ["check", str(src), "--plot", str(out)], prog_name="metertop")
    assert res.exit_code == 1, res.output  # the file's 4/4 is the sequencer's default over a 6/8 jig
    assert out.exists() and out.stat().st_size > 10_000
    strip = drawn["fig"].axes[3]
    lines = [c for c in strip.collections if c.get_gid() == "notated-downbeats"]
    assert len(lines) == 1
    xs = sorted(seg[0][0] for seg in lines[0].get_segments())
    lo, hi = strip.get_xlim()
    ref = pretty_midi.PrettyMIDI(str(src)).get_downbeats()
    np.testing.assert_allclose(xs, ref[(ref >= lo) & (ref <= hi)], atol=1e-9)
    again = CliRunner().invoke(app, ["check", str(src), "--plot", str(out)], prog_name="metertop")
    assert again.exit_code == 2 and "exists" in again.stderr
