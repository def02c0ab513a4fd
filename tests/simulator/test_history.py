"""Bulk history: the batches equal the plant's samples; one simulated day is timed (printed)."""
from __future__ import annotations

import time
from datetime import timedelta

import numpy as np
import pytest

from simulator.history import generate_history, history_grid_s, iter_history_arrays
from simulator.plant import Plant


def test_batches_hold_every_tag_at_every_step_and_equal_the_plant_samples(site, start, calm):
    plant = Plant(site, start=start, scenario=calm, profile_interval_s=300.0)
    end = start + timedelta(hours=2)
    batches = list(generate_history(plant, plant.tags, start, end, 10.0, batch_s=1800.0))
    assert len(batches) == 5  # 721 steps in batches of 180
    readings = [r for b in batches for r in b]
    assert len(readings) == 721 * len(plant.tags)
    assert readings[0].ts == start and max(r.ts for r in readings) == end
    again = Plant(site, start=start, scenario=calm, profile_interval_s=300.0)
    ref = again.sample(again.tags, start + timedelta(minutes=47, seconds=10))
    by_key = {(r.tag, r.ts): r.value for r in readings}
    for r in ref:
        assert by_key[(r.tag, r.ts)] == r.value


def test_omitting_dropouts_and_outages_are_left_out(site, start, calm):
    plant = Plant(site, start=start, scenario=calm, profile_interval_s=300.0)
    plant.inject_fault("east.do", "dropout", start + timedelta(minutes=10),
                       start + timedelta(minutes=20), omit=1)
    plant.inject_fault("*", "outage", start + timedelta(minutes=30),
                       start + timedelta(minutes=40))
    end = start + timedelta(hours=1)
    kept = [r for b in generate_history(plant, ["east.do"], start, end, 60.0) for r in b]
    assert len(kept) == 61 - 10
    skipped = [r for b in generate_history(plant, ["east.do"], start, end, 60.0,
                                           skip_outages=True) for r in b]
    assert len(skipped) == 61 - 20
    assert not any(start + timedelta(minutes=30) <= r.ts < start + timedelta(minutes=40)
                   for r in skipped)


def test_grid_alignment(site, start, calm):
    plant = Plant(site, start=start + timedelta(seconds=3), scenario=calm)
    t = history_grid_s(plant, plant.start, plant.start + timedelta(minutes=1), 10.0, align=True)
    stamps = [plant.time_at(s).timestamp() for s in t]
    assert len(t) == 6 and all(s % 10.0 == 0.0 for s in stamps)
    with pytest.raises(ValueError, match="step_s"):
        history_grid_s(plant, plant.start, plant.start, 0.0)


def test_one_simulated_day_benchmark(site, start, capsys):
    """Speed guard, printed only (no assertion on seconds): a day of 10-second readings of every
    tag of the demo site, with the default 60-s profile interval."""
    plant = Plant(site, start=start, seed=1)
    t0 = time.perf_counter()
    n = sum(len(b) for b in generate_history(plant, plant.tags, start,
                                             start + timedelta(days=1), 10.0))
    elapsed = time.perf_counter() - t0
    solves = plant.profile_solves
    with capsys.disabled():
        print(f"\n[benchmark] one simulated day, {len(plant.tags)} tags every 10 s: {n} "
              f"readings, {solves} profile solves, {elapsed:.2f} s "
              f"({86400.0 / elapsed:.0f}x real time)")
    assert n == 8641 * len(plant.tags)
    arrays = next(iter_history_arrays(plant, plant.tags, start, start + timedelta(hours=1)))
    assert np.all(np.isfinite(arrays[1]["east.forebay_level"].values))
