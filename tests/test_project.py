"""The README's contract: its commands, its caution, its feature table."""

from pathlib import Path

from features import schema

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")
TEST_COMMAND = 'pip install -e ".[test]" && python -m pytest -q'


def test_ci_runs_exactly_the_readme_test_command():
    """`.ci/run` ends with the README's test command, verbatim."""
    assert TEST_COMMAND in README
    ci_lines = [ln for ln in (ROOT / ".ci/run").read_text().splitlines()
                if ln.strip() and not ln.lstrip().startswith("#")]
    assert ci_lines[-1].strip() == TEST_COMMAND


def test_readme_states_the_caution():
    """The README says pulsesort is not a warning or safety system."""
    assert "not a\nlightning warning or safety system" in README.replace("**", "")


def test_readme_feature_table_is_the_schema():
    """The README's feature table is the one `pulsesort features --list --markdown` prints."""
    assert schema.format_table(markdown=True) in README


def test_top_level_layout():
    """The fixed top-level layout is present."""
    for name in ("README.md", "DEVELOPERS.md", "pyproject.toml", "LICENSE", "classify",
                 "features", "tests", "models", "data_cards"):
        assert (ROOT / name).exists(), name
