"""How flags are shown: a flag several sections raise in the same words is shown once, naming each."""

from planner.results import shown_flags

SUCROSE = "trehalose: the sucrose coefficients are used"


def test_the_same_flag_from_two_sections_is_shown_once_naming_both():
    flags = [
        {"code": "indicative", "message": f"solution: {SUCROSE}", "source": "crc-handbook"},
        {"code": "missing-data", "message": "solution: no Gordon-Taylor data", "source": "gordon-taylor-1952"},
        {"code": "indicative", "message": f"chamber: {SUCROSE}", "source": "crc-handbook"},
        {"code": "indicative", "message": f"cells: {SUCROSE}", "source": "crc-handbook"},
    ]
    shown = shown_flags(flags)
    assert [f["message"] for f in shown] == [f"solution, chamber, cells: {SUCROSE}", "solution: no Gordon-Taylor data"]
    assert shown[0]["code"] == "indicative" and shown[0]["source"] == "crc-handbook"
    assert flags[0]["message"] == f"solution: {SUCROSE}"  # the report's own flags are left as raised


def test_flags_differing_in_code_or_source_stay_apart():
    flags = [
        {"code": "indicative", "message": f"solution: {SUCROSE}", "source": "crc-handbook"},
        {"code": "extrapolated", "message": f"chamber: {SUCROSE}", "source": "crc-handbook"},
        {"code": "indicative", "message": f"chamber: {SUCROSE}", "source": "other"},
    ]
    assert [f["message"] for f in shown_flags(flags)] == [f["message"] for f in flags]


def test_the_same_section_twice_and_flags_with_no_section_are_kept_whole():
    twice = [{"code": "indicative", "message": f"solution: {SUCROSE}"}] * 2
    assert [f["message"] for f in shown_flags(twice)] == [f"solution: {SUCROSE}"]
    bare = [{"code": "indicative", "message": "No section named Here"}] * 2
    assert len(shown_flags(bare)) == 2  # no section to name: both are shown, nothing merged away
    assert shown_flags([]) == []
