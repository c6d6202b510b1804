"""The README's "Use it from Python" recipe runs as it stands on a simulated season."""

import re
from pathlib import Path

import pytest

from classify.triage import RESULT_COLUMNS
from tests._hollowmere import hollowmere

README = Path(__file__).resolve().parents[1] / "README.md"


def recipe() -> str:
    """The first ```python block of the README's "Use it from Python" section, verbatim."""
    text = README.read_text(encoding="utf-8")
    section = text.split("\n## Use it from Python\n", 1)[1].split("\n## ", 1)[0]
    blocks = re.findall(r"```python\n(.*?)```", section, flags=re.S)
    assert blocks, "no python block in the README's 'Use it from Python' section"
    return blocks[0]


def test_the_recipe_is_a_short_notebook_cell():
    """About ten lines of code: open, load, predict, doubtful ones, explain one, plot one."""
    code = [line for line in recipe().splitlines() if line.strip()]
    assert len(code) <= 12
    for call in ("open_catalog(", "load_model(", "predict_catalog(", "needs_review",
                 "explain_pulses(", "pulse_figure_from_catalog("):
        assert call in recipe(), call


def test_the_recipe_runs_verbatim(tmp_path, monkeypatch, capsys):
    """In a folder holding the demo's names (hollowmere-2032/, models/; a simulated
    season and a model trained on another one: invented data, self-consistency), the
    block runs unchanged and shows the doubtful pulses, one explanation and one figure."""
    pytest.importorskip("matplotlib")
    season = hollowmere()
    (tmp_path / "hollowmere-2032").symlink_to(season["b"], target_is_directory=True)
    (tmp_path / "models").symlink_to(season["root"] / "models", target_is_directory=True)
    monkeypatch.chdir(tmp_path)
    namespace = {"__name__": "__readme__"}
    exec(compile(recipe(), str(README), "exec"), namespace)  # noqa: S102 - the README's code
    shown = capsys.readouterr().out
    results, doubtful, one = namespace["results"], namespace["doubtful"], namespace["one"]
    assert len(results) == 300 and list(results.columns[:6]) == list(RESULT_COLUMNS)
    assert len(doubtful) > 0 and doubtful["needs_review"].all()
    assert doubtful["confidence"].is_monotonic_increasing
    first = one["event_id"].iloc[0]
    assert first in shown and one["review_why"].iloc[0][:30] in shown.replace("\n", " ")
    assert f"(for {one['label'].iloc[0]})" in shown            # the explanation's words
    png = (tmp_path / "doubtful.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 10_000
    truth = season["truth_b"]["label"].to_numpy()
    assert (results["label"].to_numpy() == truth).mean() > 0.9
