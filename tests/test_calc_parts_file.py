"""The ``--parts`` TOML file read by its pydantic model: values, units, messages naming the key."""

from __future__ import annotations

import pytest

from heft.daemon.calc.parts_file import parse_parts_file
from heft.daemon.calc.requests import CalcError
from heft.daemon.physics.build_defaults import End

GOOD = """
length = "940mm"
[head]
mass = "9.5oz"
cg_from_end = 0.75
[shaft]
mass = 120
length = "41in"
balance_point = "21in"
tip_trim = 1.5
[grip]
mass = "50g"
[[extra]]
name = "lead tape"
mass = "2g"
at = 36
rides_with = " TIP "
[[extra]]
name = 7
mass = 1
at = "1in"
[[extra]]
mass = 3
at = 20
"""


def test_values_are_grams_and_inches() -> None:
    parts = parse_parts_file(GOOD)
    values = parts.values()
    # 1 in = 25.4 mm and 1 oz = 28.349523125 g exactly (international yard and pound, 1959).
    assert values["length_in"] == pytest.approx(940 / 25.4)
    assert values["head_g"] == pytest.approx(9.5 * 28.349523125)
    assert values["shaft_length_in"] == 41.0 and values["tip_trim_in"] == 1.5
    assert "butt_trim_in" not in values and "grip_cg_in" not in values  # not given: defaults
    extras = parts.extras()
    assert [e.name for e in extras] == ["lead tape", "7", "extra 3"]
    assert [e.rides_with for e in extras] == [End.TIP, None, None]
    assert extras[1].position_in == 1.0


@pytest.mark.parametrize(
    ("old", "new", "message"),
    [
        ("mass = 120", 'mass = "heavy"', "shaft.mass: 'heavy' is not a mass"),
        ("mass = 120", "mass = nan", "shaft.mass: must be a finite number (got nan)"),
        ("mass = 120", "mass = true", "shaft.mass: must be a number or a string like '262g'"),
        ('length = "41in"', 'length = "41kg"', "shaft.length: '41kg' has unit 'kg'"),
        ("[grip]", "[grip]\nweigth = 3", "[grip]: unknown key 'weigth'; expected one of cg, mass"),
        ('length = "940mm"', 'lenght = "940mm"', "unknown key 'lenght'; did you mean 'length'?"),
        ("at = 20", "at = inf", "[[extra]] #3 at: must be a finite number (got inf)"),
        ("at = 20", "", "[[extra]] #3 at: is required"),
        ('rides_with = " TIP "', 'rides_with = "head"', "[[extra]] #1 rides_with: Input should "
         "be 'tip' or 'butt' (got 'head')"),
        ("[grip]\nmass", "[[grip]]\nmass", "grip: must be a table"),
        ('length = "940mm"', "length = [", "not valid TOML"),
    ],
)  # fmt: skip
def test_a_bad_file_names_the_key(old: str, new: str, message: str) -> None:
    assert old in GOOD
    with pytest.raises(CalcError) as err:
        parse_parts_file(GOOD.replace(old, new, 1))
    assert err.value.fields == ("parts_file",)
    assert message in err.value.message
    assert "\n" not in err.value.message
