"""The tag catalogue derived from the site model."""

import pytest

from ops_logic.site import load_site, parse_site
from ops_logic.tags import gauged_pools, site_tags


def test_demo_catalogue_covers_levels_quality_and_actuators():
    tags = site_tags(load_site())
    names = [t.name for t in tags]
    assert len(names) == len(set(names))
    for name in ("east.forebay_level", "east.tailwater_level", "east.P40.level",
                 "east.P40.level_b", "east.water_temp", "east.do", "east.trash_rack_dp",
                 "east.exit.crest", "east.E1.crest", "east.G1.opening", "east.PS1.pumps",
                 "east.PS1.trip", "west.G2.opening"):
        assert name in names
    assert "west.exit.crest" not in names  # the west exit is a fixed slot
    addresses = [t.address for t in tags]
    assert addresses[0] == "ns=2;i=1000" and len(set(addresses)) == len(addresses)


def test_default_gauges_first_every_tenth_last():
    east = load_site().fishway("east")
    pools, redundant = gauged_pools(east)
    assert pools == ["P01", "P10", "P20", "P30", "P40"]
    assert redundant == ["P40"]


def test_overrides_apply_and_typos_are_refused(site_dict):
    data = site_dict()
    data["ingest"] = {"tags": [{"name": "t1.forebay_level", "address": "ns=3;i=7",
                                "poll_seconds": 2}]}
    tag = next(t for t in site_tags(parse_site(data)) if t.name == "t1.forebay_level")
    assert (tag.address, tag.poll_seconds) == ("ns=3;i=7", 2)
    data["ingest"] = {"tags": [{"name": "t1.forbay_level", "address": "x"}]}
    with pytest.raises(ValueError, match=r"no such tag: t1\.forbay_level"):
        site_tags(parse_site(data))
