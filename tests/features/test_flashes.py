"""Flash grouping against the simulator's flash truth (invented seasons).

Agreement is the adjusted Rand index (``sklearn.metrics.adjusted_rand_score``, the
reference implementation): 1 for identical groupings, ~0 for chance.
"""

import dataclasses
import json

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import adjusted_rand_score

from classify.cli import main
from features import InputError, open_catalog, write_catalog
from features.flashes import FlashSettings, group_flashes, pulse_positions_m
from features.simulate import simulate_season

SMALL = {"field_samples": 400, "pretrigger_s": 5e-6, "vhf_samples": 500}


@pytest.fixture(scope="module")
def season(tmp_path_factory):
    """1,500 simulated pulses (~280 flashes, storms of ~7 flashes per minute)."""
    return open_catalog(simulate_season(tmp_path_factory.mktemp("fl") / "s", 1500, 1, **SMALL))


def thinned_times(cat, factor):
    """Pulse times with every in-storm gap between flash starts divided by ``factor``
    (gaps over an hour, between storms, are kept): a denser storm, same flashes."""
    truth = cat.events["flash_id"].to_numpy()
    starts = pd.Series(cat.time_ns).groupby(truth).min().sort_values()
    gaps = np.diff(starts.to_numpy())
    gaps = np.where(gaps < 3600e9, gaps // factor, gaps)
    new = np.concatenate([[starts.iloc[0]], starts.iloc[0] + np.cumsum(gaps)])
    shift = pd.Series(new - starts.to_numpy(), index=starts.index)
    per_min = (gaps < 3600e9).sum() / (gaps[gaps < 3600e9].sum() / 60e9)
    return cat.time_ns + shift.loc[truth].to_numpy(), per_min


@pytest.mark.parametrize("factor", [1, 1.25])
def test_grouping_matches_truth_up_to_ten_flashes_per_minute(season, factor):
    """ARI >= 0.95 for storms of <= 10 flashes per minute (the project's target)."""
    t, per_min = thinned_times(season, factor)
    assert per_min <= 10.0
    labels = group_flashes(t, pulse_positions_m(season))
    assert adjusted_rand_score(season.events["flash_id"], labels) >= 0.95


def test_positions_help_in_dense_storms(season):
    """At ~60 flashes per minute, space keeps concurrent flashes apart: the grouping
    with positions beats time alone (the README states the numbers)."""
    t, per_min = thinned_times(season, 8)
    assert per_min > 40
    truth = season.events["flash_id"]
    with_xy = adjusted_rand_score(truth, group_flashes(t, pulse_positions_m(season)))
    time_only = adjusted_rand_score(truth, group_flashes(t))
    assert with_xy > time_only + 0.1


def test_positions_from_angles_and_range_agree_with_xyz(season):
    """Mean source x/y and range_m along the mean azimuth agree within a few km (the
    sources of a pulse spread along its channel; self-consistency)."""
    xy = pulse_positions_m(season)
    s = season.sources
    no_xyz = type(s)(s.event_index, s.t_s, s.azimuth_deg, s.elevation_deg, None, None,
                     s.offsets)
    xy2 = pulse_positions_m(dataclasses.replace(season, sources=no_xyz))
    ok = np.isfinite(xy).all(1) & np.isfinite(xy2).all(1)
    assert ok.mean() > 0.95
    assert np.median(np.hypot(*(xy[ok] - xy2[ok]).T)) < 3e3


def test_hand_made_cases():
    """Closed cases: a 0.6 s gap splits; two flashes at the same time 30 km apart stay
    apart; a pulse without position joins the nearest located pulse in time."""
    s = 1_000_000_000
    t = np.array([0, s // 10, 7 * s // 10])
    assert group_flashes(t).tolist() == [0, 0, 1]
    t = np.array([0, 1, 2, 3]) * (s // 100)
    xy = np.array([[0, 0], [30e3, 0], [1e3, 0], [np.nan, np.nan]])
    assert group_flashes(t, xy).tolist() == [0, 1, 0, 0]
    with pytest.raises(InputError, match="'gap_s' must be a number > 0"):
        FlashSettings(gap_s=0)


def test_catalog_without_flash_ids_gets_them(season, tmp_path, capsys):
    """A catalog written without flash ids, grouped by the command: ids, the method in the
    manifest, ARI >= 0.95; the original is refused as it already has ids; exit 2."""
    ev = season.events[["event_id", "range_m"]].copy()
    ev.insert(1, "time_utc", season.time_ns)
    s = season.sources
    src = pd.DataFrame({"event_id": season.event_ids[s.event_index], "t_s": s.t_s,
                        "azimuth_deg": s.azimuth_deg, "elevation_deg": s.elevation_deg})
    meta = {k: v for k, v in season.manifest["field"].items() if k != "file"}
    bare = write_catalog(tmp_path / "bare", ev, season.field.open(), field_meta=meta,
                         sources=src, catalog_id="hollowmere-bare")
    assert main(["flashes", str(bare), "--out", str(tmp_path / "grouped")]) == 0
    assert "flashes" in capsys.readouterr().out
    cat = open_catalog(tmp_path / "grouped")
    assert adjusted_rand_score(season.events["flash_id"], cat.events["flash_id"]) >= 0.95
    rec = json.loads((tmp_path / "grouped" / "catalog.json").read_text())["flash_grouping"]
    assert rec["gap_s"] == 0.5 and rec["distance_m"] == 10e3
    assert rec["n_flashes"] == cat.events["flash_id"].nunique()
    assert main(["flashes", str(season.path), "--out", str(tmp_path / "again")]) == 2
    assert "already holds flash ids" in capsys.readouterr().err
    assert not (tmp_path / "again").exists()
    assert main(["flashes", str(season.path), "--out", str(tmp_path / "again"),
                 "--replace", "--gap-s", "0.3"]) == 0
    again = open_catalog(tmp_path / "again")
    assert (again.events["flash_id_before"] == season.events["flash_id"]).all()
