"""The site-file schema: units, repeated baffles, bands, the shipped demo site."""

import copy

import pytest

from ops_logic.site import SiteConfigError, demo_site_path, load_site, parse_site

FT = 0.3048


def test_demo_site_loads_with_two_fishways_of_different_types():
    site = load_site()
    assert demo_site_path().is_file()
    assert [f.id for f in site.fishways] == ["east", "west"]
    east, west = site.fishways
    assert {b.type for b in east.baffles} == {"weir_orifice"}
    assert {b.type for b in west.baffles} == {"vertical_slot"}
    assert {a.type for a in east.aux} == {"gravity", "pumps"}
    assert len(east.pools) == 40


def test_values_are_si_after_loading():
    east = load_site().fishway("east")
    # 1 ft = 0.3048 m exactly (international foot); 1 cfs = 0.028316846592 m3/s
    assert east.forebay_range == pytest.approx((252.0 * FT, 255.5 * FT))
    assert east.targets.min_attraction_flow == pytest.approx(150 * 0.028316846592)
    west = load_site().fishway("west")
    assert west.aux[0].valve.diameter == pytest.approx(0.75)  # given as "0.75 m"


def test_repeat_expands_to_evenly_dropping_baffles(site_dict):
    data = site_dict(n_baffles=1)
    base = data["fishways"][0]["baffles"][0]
    data["fishways"][0]["baffles"] = [{**base, "repeat": 4, "drop": "0.25 m"}]
    f = parse_site(data).fishways[0]
    crests = [b.crest for b in f.baffles]
    assert crests == pytest.approx([base["crest"] - 0.25 * k for k in range(4)])
    assert [p.floor for p in f.pools[1:]] == pytest.approx(
        [base["pool"]["floor"] - 0.25 * k for k in range(4)])
    assert f.baffle_ids() == ["B01", "B02", "B03", "B04"]


@pytest.mark.parametrize(("value", "si"), [("1.5 ft", 1.5 * FT), ("0.4572 m", 0.4572),
                                           ("18 inch", 18 * 0.0254), (1.5, 1.5 * FT)])
def test_lengths_accept_explicit_units(site_dict, value, si):
    # pint parses the unit; 1 ft = 0.3048 m and 1 in = 0.0254 m exactly (international units)
    data = site_dict()
    data["fishways"][0]["exit"]["width"] = value
    if isinstance(value, float):
        si = value  # a bare number is read in the file's own system (SI here)
    assert parse_site(data).fishways[0].exit.width == pytest.approx(si)


def test_errors_name_the_dotted_path_and_collect_several(site_dict):
    data = site_dict()
    fw = data["fishways"][0]
    fw["baffles"][2]["width"] = -1.0
    fw["exit"]["width"] = "3 cfs"
    del fw["entrance"]["gates"][0]["width"]
    with pytest.raises(SiteConfigError) as err:
        parse_site(data, "x.toml")
    paths = dict(err.value.errors)
    assert "greater than 0" in paths["fishways[0].baffles[2].width"]
    assert "not a length" in paths["fishways[0].exit.width"]
    assert paths["fishways[0].entrance.gates[0].width"] == "missing (required)"
    assert str(err.value).startswith("x.toml: ")


def test_band_needs_an_ordered_range_and_a_target_inside(site_dict):
    data = site_dict()
    data["fishways"][0]["targets"]["entrance_head"] = {"min": 0.5, "max": 0.2}
    with pytest.raises(SiteConfigError, match="entrance_head"):
        parse_site(data)
    data = site_dict()
    data["fishways"][0]["targets"]["pool_head_drop"] = {"max": 0.3}
    with pytest.raises(SiteConfigError, match="one-sided band needs a target"):
        parse_site(data)


def test_unknown_time_zone_is_refused(site_dict):
    data = copy.deepcopy(site_dict())
    data["site"]["time_zone"] = "Mars/Olympus"
    with pytest.raises(SiteConfigError, match="time zone"):
        parse_site(data)


def test_an_error_in_a_repeated_entry_is_reported_once_by_its_file_entry(site_dict):
    data = site_dict(n_baffles=2)
    base = data["fishways"][0]["baffles"][0]
    data["fishways"][0]["baffles"] = [data["fishways"][0]["baffles"][1],
                                      {**base, "width": -1.0, "repeat": 5, "drop": 0.1}]
    with pytest.raises(SiteConfigError) as err:
        parse_site(data)
    width_errors = [p for p, _ in err.value.errors if p.endswith(".width")]
    assert width_errors == ["fishways[0].baffles[1] (copy 1 of 5).width"]
