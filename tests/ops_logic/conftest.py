"""Builders of small SI site files for solver and recommender tests (invented geometry)."""

from __future__ import annotations

from typing import Any

import pytest

from ops_logic.ladder import Ladder
from ops_logic.site import load_site, parse_site


def pool_and_weir_site(*, n_baffles: int = 8, step_m: float = 0.3, crest_top_m: float = 100.0,
                       weir_width_m: float = 1.5, pool_width_m: float = 3.0,
                       pool_length_m: float = 3.0, depth_below_crest_m: float = 1.5,
                       kind: str = "weir", aux: bool = False) -> dict[str, Any]:
    """A uniform ladder: exit weir + ``n_baffles`` baffles of one ``kind``, crests ``step_m``
    apart, in SI. ``kind`` is "weir", "weir_orifice" or "vertical_slot"."""
    baffles = []
    for i in range(n_baffles):
        crest = crest_top_m - step_m * (i + 1)
        floor = crest - depth_below_crest_m - step_m  # floor of the pool below this baffle
        pool = {"floor": floor, "length": pool_length_m, "width": pool_width_m}
        if kind == "weir":
            baffles.append({"type": "weir", "crest": crest, "width": weir_width_m, "pool": pool})
        elif kind == "weir_orifice":
            baffles.append({"type": "weir_orifice", "crest": crest, "weir_width": weir_width_m / 2,
                            "weir_count": 2, "pool": pool,
                            "orifices": [{"invert": floor + step_m, "width": 0.3,
                                          "height": 0.3}]})
        else:
            baffles.append({"type": "vertical_slot", "invert": floor + step_m,
                            "slot_width": 0.3, "pool": pool})
    last = baffles[-1]["pool"]["floor"]
    fw: dict[str, Any] = {
        "id": "t1", "name": "Test ladder",
        "forebay_range": [crest_top_m - 0.2, crest_top_m + 1.0],
        "tailwater_range": [last + 0.5, last + 2.5],
        "exit": {"type": "adjustable_weir", "width": weir_width_m,
                 "crest_range": [crest_top_m - 1.0, crest_top_m + 0.5],
                 "approach_floor": crest_top_m - depth_below_crest_m - 1.0 - step_m,
                 "pool": {"floor": crest_top_m - step_m - depth_below_crest_m,
                          "length": pool_length_m,
                          "width": pool_width_m}},
        "baffles": baffles,
        "entrance": {"gates": [{"id": "E1", "width": weir_width_m,
                                "crest_range": [last + 0.2, last + 2.5]}]},
        "targets": {"pool_head_drop": {"target": step_m, "max": step_m * 1.3},
                    "entrance_head": {"min": 0.2, "target": 0.3, "max": 0.45},
                    "exit_head": {"min": 0.2, "target": 0.3, "max": 0.4},
                    "max_power_density": 300.0,
                    "max_diffuser_velocity": {"wall": 0.3, "floor": 0.15},
                    "min_attraction_flow": 0.0},
        "aux": [],
    }
    if aux:
        fw["aux"] = [{"type": "gravity", "id": "G1", "into_pool": "entrance",
                      "diffuser_area": 4.0,
                      "valve": {"diameter": 0.3, "characteristic": "linear", "k_open": 0.3},
                      "conduit": {"length": 40.0, "diameter": 0.3, "roughness": 0.0003,
                                  "minor_k": 1.5}}]
        fw["targets"]["min_attraction_flow"] = 0.5
    return {"site": {"name": "Test site", "units": "si"}, "fishways": [fw]}


@pytest.fixture(scope="session")
def site_dict():
    return pool_and_weir_site


@pytest.fixture(scope="session")
def make_ladder():
    def build(**kwargs: Any) -> Ladder:
        return Ladder(parse_site(pool_and_weir_site(**kwargs)).fishways[0])

    return build


@pytest.fixture(scope="session")
def demo_site():
    return load_site()


@pytest.fixture(scope="session")
def east(demo_site):
    return Ladder.from_site(demo_site, "east")


@pytest.fixture(scope="session")
def west(demo_site):
    return Ladder.from_site(demo_site, "west")
