"""Figures for papers: rendered headless, sizes in pixels, units on every axis, formats."""

from __future__ import annotations

import re
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("matplotlib")

from matplotlib.image import imread  # noqa: E402

from classify.cli import main  # noqa: E402
from classify.figures import (  # noqa: E402
    SIZES,
    class_distributions_figure,
    confidence_figure,
    pairwise_figure,
    pulse_figure,
    save_figure,
)
from features import InputError  # noqa: E402
from tests.conftest import bipolar_field  # noqa: E402

from ._review_testkit import triaged_catalog  # noqa: E402

#: A unit in parentheses or brackets at the end of a label.
UNIT = re.compile(r"[(\[][^()\[\]]+[)\]]$")
CLASSES = ["narrow_bipolar", "recoil", "stepped_leader"]


def _trace(vhf=True):
    """An invented pulse trace: a bipolar pulse at the trigger, two neighbours, VHF burst."""
    t = np.arange(-40e-6, 100e-6, 0.05e-6)
    e = bipolar_field(t, 0.0, 0.5e-6, 2e-6, 0.4, 10e-6, 8.0)
    e += bipolar_field(t, 35e-6, 0.3e-6, 1e-6, 0.2, 3e-6, 2.0)
    trace = {"time_s": t, "field_v_per_m": e, "extent_s": (-0.2e-6, 14e-6),
             "neighbours_s": np.array([35e-6, -30e-6]),
             "neighbour_peaks_v_per_m": np.array([2.0, 0.1])}
    if vhf:
        tv = np.arange(-40e-6, 60e-6, 0.04e-6)
        trace["vhf_time_s"] = tv
        trace["vhf_envelope"] = 1e-3 + np.exp(-0.5 * ((tv - 3e-6) / 2e-6) ** 2)
    return trace


def _sources(altitude=True):
    t = np.linspace(-1e-6, 12e-6, 9)
    df = pd.DataFrame({"t_s": t, "azimuth_deg": 120 + 2e5 * t,
                       "elevation_deg": 20 + 1e5 * t})
    if altitude:
        df["altitude_m"] = 9000 + 4e8 * t
    return df


def _results(n=600, seed=0):
    """An invented triage results table (self-consistency data, not physics)."""
    rng = np.random.default_rng(seed)
    label = rng.choice(CLASSES, n)
    width = np.where(label == "stepped_leader", 10 ** rng.uniform(-6.5, -5.5, n),
                     10 ** rng.uniform(-5.5, -4, n))
    return pd.DataFrame({
        "event_id": [f"e{i}" for i in range(n)], "label": label,
        "confidence": rng.uniform(0.4, 1.0, n), "width_s": width,
        "initial_half_cycle_s": width / 3, "rise_time_s": width / 20,
        "bipolarity": rng.uniform(0.1, 0.8, n),
        "range_normalized_peak_v_per_m": rng.choice([-1, 1], n) * 10 ** rng.uniform(-1, 2, n),
        "vhf_snr_db": rng.uniform(5, 60, n), "speed_m_per_s": 10 ** rng.uniform(4, 8, n),
        "isolation_any_s": 10 ** rng.uniform(-5, 1, n),
        **{f"p_{c}": np.full(n, 1 / 3) for c in CLASSES}})


def _labels(fig):
    """Every non-empty axis label of a figure (colour bars included)."""
    out = []
    for ax in fig.axes:
        out += [lab for lab in (ax.get_xlabel(), ax.get_ylabel()) if lab]
    return out


def _all_figures():
    res = _results()
    return {"pulse": pulse_figure(_trace(), _sources()),
            "pulse-column": pulse_figure(_trace(), _sources(), size="column"),
            "distributions": class_distributions_figure(res),
            "pairs": pairwise_figure(res),
            "pairs-column": pairwise_figure(res, size="column"),
            "confidence": confidence_figure(res)}


def test_every_axis_label_carries_a_unit():
    """Each axis label ends with its unit in parentheses or brackets."""
    for name, fig in _all_figures().items():
        labels = _labels(fig)
        assert len(labels) >= 2, name
        bad = [lab for lab in labels if not UNIT.search(lab)]
        assert not bad, (name, bad)


@pytest.mark.parametrize("size", ["column", "page"])
def test_png_pixel_size_matches_the_journal_width(tmp_path, size):
    """A PNG read back has width = inches x dpi (3.5 in column, 7 in page)."""
    fig = pulse_figure(_trace(), _sources(), size=size)
    out = save_figure(fig, tmp_path / f"p-{size}.png", dpi=100)
    img = imread(out)
    width_in, height_in = fig.get_size_inches()
    assert width_in == SIZES[size]
    assert img.shape[1] == round(SIZES[size] * 100)
    assert img.shape[0] == round(height_in * 100)
    assert img.std() > 0.05          # something was drawn, not a blank canvas


def test_pdf_and_svg_start_with_their_magic_bytes(tmp_path):
    """PDF files start with %PDF-, SVG files are XML holding an <svg> element."""
    fig = confidence_figure(_results())
    pdf = save_figure(fig, tmp_path / "c.pdf").read_bytes()
    svg = save_figure(confidence_figure(_results()), tmp_path / "c.svg").read_bytes()
    assert pdf.startswith(b"%PDF-")
    assert svg.startswith(b"<?xml") and b"<svg" in svg[:2000]
    # no dates or random ids in the files: the same figure drawn again, the same bytes
    again = save_figure(confidence_figure(_results()), tmp_path / "d.svg").read_bytes()
    assert again == svg


def test_other_formats_are_refused(tmp_path):
    """Only .png, .pdf and .svg; nothing is written otherwise."""
    fig = confidence_figure(_results())
    with pytest.raises(InputError, match=r"c\.jpg: unknown figure format '\.jpg'; use \.png"):
        save_figure(fig, tmp_path / "c.jpg")
    assert not list(tmp_path.iterdir())


def test_pulse_figure_draws_the_trace_as_given():
    """Time in µs, the extent shaded, neighbours marked, VHF in dB re peak, altitude in km."""
    tr, src = _trace(), _sources()
    fig = pulse_figure(tr, src)
    field, vhf, sky, alt, bar = fig.axes
    line = field.get_lines()[-2]  # the zero line first, then the field, then the neighbours
    np.testing.assert_allclose(line.get_xdata(), tr["time_s"] * 1e6)
    np.testing.assert_allclose(line.get_ydata(), tr["field_v_per_m"])
    marks = field.get_lines()[-1]
    np.testing.assert_allclose(marks.get_xdata(), [35.0, -30.0])
    span = field.patches[0].get_extents()  # display box of the shaded extent
    x0, x1 = field.transData.inverted().transform([[span.x0, 0], [span.x1, 0]])[:, 0]
    np.testing.assert_allclose([x0, x1], [-0.2, 14.0], atol=1e-6)
    db = vhf.get_lines()[0].get_ydata()
    assert db.max() == pytest.approx(0.0, abs=1e-9)
    assert db.min() == pytest.approx(10 * np.log10(1e-3 / (1 + 1e-3)), abs=1e-6)
    np.testing.assert_allclose(alt.collections[0].get_offsets()[:, 1],
                               src["altitude_m"] * 1e-3)
    assert bar.get_ylabel() == "Time from trigger (µs)"
    # without VHF and altitude those panels are left out
    assert len(pulse_figure(_trace(vhf=False), _sources(altitude=False)).axes) == 3


def test_bad_trace_names_the_key():
    """A trace without the field, or with mismatched lengths, is refused by name."""
    tr = _trace()
    del tr["field_v_per_m"]
    with pytest.raises(InputError, match="missing key 'field_v_per_m'"):
        pulse_figure(tr)
    tr = _trace()
    tr["neighbour_peaks_v_per_m"] = np.array([1.0])
    with pytest.raises(InputError, match="'neighbours_s' and 'neighbour_peaks_v_per_m'"):
        pulse_figure(tr)
    with pytest.raises(InputError, match=r"sources: missing column\(s\) \['azimuth_deg'\]"):
        pulse_figure(_trace(), _sources().drop(columns="azimuth_deg"))


def test_log_axes_where_values_span_decades():
    """Width spans 2.5 decades (log axis); bipolarity less than one (linear)."""
    fig = class_distributions_figure(_results(), size="column")
    scales = {ax.get_xlabel(): ax.get_xscale() for ax in fig.axes if ax.get_visible()}
    assert scales["width (µs)"] == "log"
    assert scales["bipolarity (1)"] == "linear"
    assert scales["|peak at 100 km| (V/m)"] == "log"
    assert scales["VHF peak over noise (dB)"] == "linear"
    conf = confidence_figure(_results())
    assert conf.axes[0].get_yscale() == "log"
    legend = [t.get_text() for t in conf.axes[0].get_legend().get_texts()]
    assert legend == CLASSES


def test_figures_render_without_a_display():
    """In a fresh interpreter without DISPLAY: figures render and pyplot is never imported."""
    code = ("import sys, numpy as np, pandas as pd\n"
            "from classify.figures import confidence_figure, save_figure\n"
            "df = pd.DataFrame({'label': ['a', 'b'] * 5, 'confidence': np.linspace(.5, 1, 10)})\n"
            "save_figure(confidence_figure(df), sys.argv[1])\n"
            "assert 'matplotlib.pyplot' not in sys.modules\n")
    env = {k: v for k, v in __import__("os").environ.items() if k not in ("DISPLAY",
                                                                         "MPLBACKEND")}
    out = __import__("pathlib").Path(__import__("tempfile").mkdtemp()) / "c.png"
    subprocess.run([sys.executable, "-c", code, str(out)], check=True, env=env, timeout=120)
    assert imread(out).shape[1] == round(SIZES["column"] * 300)


@pytest.fixture(scope="module")
def triaged(tmp_path_factory):
    """A simulated catalog and its real rules-mode triage."""
    return triaged_catalog(tmp_path_factory.mktemp("figures"), events=120, seed=3)


def test_figure_command(triaged, tmp_path, capsys):
    """`pulsesort figure`: every kind writes its file; bad format or event exits 2."""
    cat_dir, results = triaged
    eid = pd.read_csv(cat_dir / "events.csv", dtype=str)["event_id"].iat[-1]
    assert main(["figure", "pulse", str(cat_dir), eid, "--out", str(tmp_path / "p.png"),
                 "--size", "column", "--dpi", "100"]) == 0
    assert imread(tmp_path / "p.png").shape[1] == 350
    for kind, ext in [("distributions", "svg"), ("pairs", "pdf"), ("confidence", "png")]:
        out = tmp_path / f"{kind}.{ext}"
        assert main(["figure", kind, str(results), "-o", str(out)]) == 0, kind
        assert out.stat().st_size > 1000
    capsys.readouterr()
    assert main(["figure", "confidence", str(results), "-o", str(tmp_path / "c.gif")]) == 2
    assert "unknown figure format '.gif'" in capsys.readouterr().err
    assert not (tmp_path / "c.gif").exists()
    assert main(["figure", "pulse", str(cat_dir), "no-such", "-o",
                 str(tmp_path / "x.png")]) == 2
    assert "no event_id 'no-such'" in capsys.readouterr().err
