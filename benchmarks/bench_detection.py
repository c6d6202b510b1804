"""Pulse detection in continuous records: recall and false triggers against SNR, and flash
grouping against storm density.

Detection: the simulator's physical pulse fields (``features.simulate.pulse_fields``) through
a fast antenna's RC decay, placed 2-4 ms apart at known onsets in unit Gaussian noise with
peak amplitude ``10**(SNR/20)`` (the helpers of ``tests/features/test_trigger.py``), found by
``features.trigger.detect_pulses`` with its default settings (k = 6). A trigger from 2 us
before to 40 us after a true onset is a hit; every other trigger is false (counted as a
fraction of the true pulses).

Grouping: a simulated season (invented storms of about 7 flashes per minute) with its in-storm
gaps between flash starts divided by a factor (denser storms, same flashes), grouped by
``features.flashes.group_flashes`` with positions from the mapped sources and by time alone;
adjusted Rand index against the simulator's flash ids.

    OMP_NUM_THREADS=1 python benchmarks/bench_detection.py            # ~1-2 minutes
    python benchmarks/bench_detection.py --pulses 1000 --events 5000   # bigger
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from sklearn.metrics import adjusted_rand_score  # noqa: E402

from features import open_catalog  # noqa: E402
from features.flashes import group_flashes, pulse_positions_m  # noqa: E402
from features.simulate import simulate_season  # noqa: E402
from features.trigger import detect_pulses  # noqa: E402
from tests.features.test_flashes import thinned_times  # noqa: E402
from tests.features.test_trigger import RATE, TAU, pulse_shapes, score, synthetic_stream  # noqa: E402,E501

SNR_DB = (8, 10, 12, 14, 16, 18, 20, 25, 30, 40, 60)
FACTORS = (1, 1.25, 2, 4, 8, 16)


def detection_table(n_pulses: int) -> list[tuple]:
    shapes = pulse_shapes(n=120, seed=0)
    rows = []
    for snr in SNR_DB:
        x, truth = synthetic_stream(snr, n_pulses, seed=1000 + snr, shapes=shapes)
        t0 = time.perf_counter()
        det = detect_pulses(x, RATE, kind="field", decay_time_s=TAU)
        dt = time.perf_counter() - t0
        recall, false = score(det.trigger_index, truth)
        rows.append((snr, n_pulses, recall, false, det.noise_level, x.size / dt / 1e6))
    return rows


def grouping_table(n_events: int) -> list[tuple]:
    with tempfile.TemporaryDirectory() as tmp:
        cat = open_catalog(simulate_season(Path(tmp) / "s", n_events, 11, field_samples=400,
                                           pretrigger_s=5e-6, vhf_samples=500))
        truth = cat.events["flash_id"]
        xy = pulse_positions_m(cat)
        rows = []
        for f in FACTORS:
            t, per_min = thinned_times(cat, f)
            rows.append((f, per_min, adjusted_rand_score(truth, group_flashes(t, xy)),
                         adjusted_rand_score(truth, group_flashes(t))))
    return rows


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--pulses", type=int, default=400, help="pulses per SNR (default 400)")
    p.add_argument("--events", type=int, default=3000, help="season size for grouping")
    a = p.parse_args(argv)
    print("| SNR (dB) | pulses | recall | false triggers / pulse | noise sigma | MS/s |")
    print("|---:|---:|---:|---:|---:|---:|")
    for snr, n, rec, fal, sig, speed in detection_table(a.pulses):
        print(f"| {snr} | {n} | {rec:.3f} | {fal:.3f} | {sig:.3f} | {speed:.0f} |")
    print()
    print("| gap factor | flashes / min in storms | ARI with positions | ARI time only |")
    print("|---:|---:|---:|---:|")
    for f, per_min, ari, ari_t in grouping_table(a.events):
        print(f"| {f:g} | {per_min:.1f} | {ari:.3f} | {ari_t:.3f} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
