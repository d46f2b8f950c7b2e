"""``heft calc`` end to end: text, --json keys, targets, parts files, and bad input (exit 2)."""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys
from pathlib import Path
from typing import Any, cast

import pytest

from heft.tui.cli import main
from heft.tui.commands import calc

BASE_KEYS = {
    "total_weight_g",
    "balance_point_in",
    "moment_g_in",
    "moment_oz_in",
    "swingweight",
    "swingweight_points",
}
TARGET_KEYS = {
    "target_swingweight_points",
    "correction_g",
    "correction_at_in",
    "corrected_total_weight_g",
    "corrected_balance_point_in",
}


def points_by_hand(moment_14in_g_in: float) -> float:
    """Points from the published scale, none of heft's constants: A0 = 161 oz*in, 1.75 oz*in per
    point (trade tables, japanese.yujigolf.com/2012/01/blog-post_10.html), 1 oz = 28.349523125 g
    (exact, 1959)."""
    return (moment_14in_g_in / 28.349523125 - 161.0) / 1.75


def run_calc(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    """Run the sub-command through its own parser (isolated from other commands' modules)."""
    parser = argparse.ArgumentParser(prog="heft")
    calc.register(parser.add_subparsers(dest="command", required=True))
    args = parser.parse_args(["calc", *argv])
    code = cast(int, args.func(args))
    out, err = capsys.readouterr()
    return code, out, err


def calc_json(argv: list[str], capsys: pytest.CaptureFixture[str]) -> dict[str, Any]:
    code, out, err = run_calc([*argv, "--json"], capsys)
    assert code == 0, err
    return cast(dict[str, Any], json.loads(out))


def test_weight_and_balance_point_json(capsys: pytest.CaptureFixture[str]) -> None:
    # The published C5 driver: 307.8 g, BP 83.5 cm, 204.9 oz*in
    # (japanese.yujigolf.com/2012/01/blog-post_10.html).
    doc = calc_json(["--weight", "307.8g", "--balance-point", "835mm"], capsys)
    assert set(doc) >= BASE_KEYS
    assert not [k for k in doc if k.endswith("_u")]  # no input carried an uncertainty
    assert doc["moment_oz_in"] == pytest.approx(204.9, abs=0.05)
    assert doc["swingweight"].startswith("C5")
    assert doc["balance_point_in"] == pytest.approx(835 / 25.4)


def test_unit_suffixes_give_the_same_club(capsys: pytest.CaptureFixture[str]) -> None:
    a = calc_json(["--weight", "390", "--balance-point", "29.5"], capsys)
    b = calc_json(["--weight", f"{390 / 28.349523125}oz", "--balance-point", "749.3mm"], capsys)
    assert b["total_weight_g"] == pytest.approx(a["total_weight_g"])
    assert b["swingweight_points"] == pytest.approx(a["swingweight_points"])


def test_two_supports_with_uncertainty(capsys: pytest.CaptureFixture[str]) -> None:
    doc = calc_json(
        ["--support-a", "4in", "--reading-a", "75", "--support-b", "36", "--reading-b", "315",
         "--display-step", "0.1", "--position-u", "0.5mm"],
        capsys,
    )  # fmt: skip
    assert doc["total_weight_g"] == pytest.approx(390.0)
    m14 = 75 * (4 - 14) + 315 * (36 - 14)  # statics
    assert doc["moment_g_in"] == pytest.approx(m14)
    assert doc["swingweight_points"] == pytest.approx(points_by_hand(m14))
    for key in BASE_KEYS - {"swingweight"}:
        assert doc[f"{key}_u"] > 0
    # Expanded: two readings each d/sqrt(6) (GUM), W = Fa + Fb, k = 2.
    assert doc["total_weight_g_u"] == pytest.approx(2 * (2 * 0.1**2 / 6) ** 0.5)


def test_butt_gap_u(capsys: pytest.CaptureFixture[str]) -> None:
    supports = ["--support-a", "4", "--reading-a", "75", "--support-b", "36", "--reading-b", "315"]
    doc = calc_json([*supports, "--butt-gap-u", "1mm"], capsys)
    # A 1 mm slide against the stop = 0.31 point on this club (domain notes, derived); k = 2.
    assert doc["swingweight_points_u"] == pytest.approx(2 * 0.31, abs=0.01)
    assert "total_weight_g_u" not in doc  # seating does not change the weight


def test_lever_beam(capsys: pytest.CaptureFixture[str]) -> None:
    doc = calc_json(["--lever-force", "1210", "--lever-arm", "5", "--weight", "420"], capsys)
    assert doc["moment_g_in"] == pytest.approx(6050.0)
    assert doc["balance_point_in"] == pytest.approx(14 + 6050 / 420)


def test_target_lands_on_target(capsys: pytest.CaptureFixture[str]) -> None:
    doc = calc_json(
        ["--weight", "412", "--balance-point", "29.1", "--target", "d-2", "--length", "37.5"],
        capsys,
    )
    assert set(doc) >= TARGET_KEYS
    assert doc["target_swingweight_points"] == 32.0
    assert doc["correction_at_in"] == pytest.approx(36.5)  # head: 1 in short of the length
    assert doc["correction_g"] < 0  # D3.4 down to D2: remove at the head
    w, bp = doc["corrected_total_weight_g"], doc["corrected_balance_point_in"]
    assert w == pytest.approx(412 + doc["correction_g"])
    assert points_by_hand(w * (bp - 14)) == pytest.approx(32.0, abs=1e-9)


def test_target_default_position_is_stated(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = run_calc(
        ["--weight", "412", "--balance-point", "29.1", "--target", "D5"], capsys
    )
    assert code == 0
    assert "add" in out and "36.00 in" in out and "--at" in out


def test_target_with_uncertainty_keys(capsys: pytest.CaptureFixture[str]) -> None:
    doc = calc_json(
        ["--weight", "412", "--balance-point", "29.1", "--display-step", "0.1",
         "--balance-point-u", "0.05", "--position-u", "0.1", "--target", "D1", "--at", "36"],
        capsys,
    )  # fmt: skip
    for key in ("correction_g", "correction_at_in", "corrected_total_weight_g",
                "corrected_balance_point_in"):  # fmt: skip
        assert doc[f"{key}_u"] > 0
    assert doc["correction_at_in_u"] == pytest.approx(0.2)


def test_out_of_range_is_reported(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = run_calc(["--weight", "200", "--balance-point", "20"], capsys)
    assert code == 0
    assert "<A0" in out and "OUT OF RANGE" in out
    doc = calc_json(["--weight", "200", "--balance-point", "20"], capsys)
    assert doc["swingweight"] == "<A0" and doc["swingweight_in_range"] is False


def test_human_output_reads_at_the_bench(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = run_calc(
        ["--weight", "412", "--balance-point", "29.1", "--display-step", "0.1"], capsys
    )
    assert code == 0
    assert "412.0 g" in out and "29.10 in" in out and "D3.4" in out and "k = 2" in out


def test_u_only_beside_values_whose_inputs_carry_one(capsys: pytest.CaptureFixture[str]) -> None:
    # Only the weighing is uncertain (display step 0.1 g, one net reading: d/sqrt(6), GUM).
    argv = ["--weight", "412", "--balance-point", "29.1", "--display-step", "0.1"]
    doc = calc_json([*argv, "--target", "D2"], capsys)
    u_w = 0.1 / 6**0.5
    assert doc["total_weight_g_u"] == pytest.approx(2 * u_w)
    assert "balance_point_in_u" not in doc  # a knife-edge BP does not depend on W (statics)
    # M12 = W*(BP - 12) (golf.okrasa.eu/clubs/swingweight-en/; derived), 1 oz = 28.349523125 g.
    assert doc["moment_12in_oz_in"] == pytest.approx(412 * 17.1 / 28.349523125)
    assert doc["moment_12in_oz_in_u"] == pytest.approx(2 * u_w * 17.1 / 28.349523125)
    assert "correction_at_in_u" not in doc  # the built-in 36 in is an assumption, not a reading
    code, out, _ = run_calc(argv, capsys)
    assert code == 0
    # 2*u_w*15.1 in / (1.75 oz*in * 28.349523125 g/oz) = 0.025 point (trade tables,
    # japanese.yujigolf.com/2012/01/blog-post_10.html); shown to two significant digits.
    assert "D3.4 ± 0.025 points" in out
    assert "29.10 in   (" in out and "± 0.00" not in out and "± 0.0 " not in out


@pytest.mark.parametrize(
    ("label", "echo", "points"),
    [("C9.95", "C9.95", 29.95), ("D-0", "D0.0", 30.0), ("d 2", "D2.0", 32.0),
     ("G10", "G10.0", 70.0)],
)  # fmt: skip
def test_target_echoes_the_precision_given(
    label: str, echo: str, points: float, capsys: pytest.CaptureFixture[str]
) -> None:
    # Label = letter (A0 = 0, ten points a letter) + points within it (domain notes).
    argv = ["--weight", "412", "--balance-point", "29.1", "--target", label, "--at", "36"]
    doc = calc_json(argv, capsys)
    assert doc["target_swingweight"] == echo
    assert doc["target_swingweight_points"] == pytest.approx(points)
    _, out, _ = run_calc(argv, capsys)
    assert f"Target {echo}:" in out


PARTS_TOML = """
length = "37in"
[head]
mass = 266
[shaft]
mass = "120g"
length = 41
balance_point = "21in"
tip_trim = 1.5
butt_trim = "3.5in"
[grip]
mass = 50
cg = 4.5
[[extra]]
name = "lead tape"
mass = "2g"
at = 36
rides_with = "tip"
"""


def test_parts_file_and_options_agree(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    path = tmp_path / "seven-iron.toml"
    path.write_text(PARTS_TOML, encoding="utf-8")
    from_file = calc_json(["--parts", str(path)], capsys)
    from_options = calc_json(
        ["--length", "37", "--head", "266", "--shaft", "120", "--shaft-length", "41",
         "--shaft-balance-point", "21", "--tip-trim", "1.5", "--butt-trim", "3.5",
         "--grip", "50", "--grip-cg", "4.5", "--extra", "2g@36:tip"],
        capsys,
    )  # fmt: skip
    for key in BASE_KEYS:
        assert from_file[key] == from_options[key]
    # Shaft trimmed 5 in of 41: lighter than 120 g; head + tape + grip are exact.
    assert 266 + 2 + 50 + 100 < from_file["total_weight_g"] < 266 + 2 + 50 + 120


def test_length_change_adds_points(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    path = tmp_path / "seven-iron.toml"
    path.write_text(PARTS_TOML, encoding="utf-8")
    doc = calc_json(["--parts", str(path), "--length-change", "0.5in"], capsys)
    # Common practice, no source: half an inch is about 3 points (band 2.4 - 4.0).
    assert 2.4 <= doc["swingweight_points_change"] <= 4.0
    assert doc["length_in"] == 37.5


def test_pendulum_moi(capsys: pytest.CaptureFixture[str]) -> None:
    doc = calc_json(
        ["--weight", "430", "--balance-point", "29", "--period", "1.85", "--pivot", "1",
         "--period-u", "0.002"],
        capsys,
    )  # fmt: skip
    # Physical pendulum plus parallel axis (phys.libretexts.org, physical pendulum):
    # I_butt = m g d T^2 / (4 pi^2) + m p (2 BP - p), d = BP - p, g = 9.80665 m/s^2 (3rd CGPM).
    g_in_s2 = 9.80665 / 0.0254
    i_butt = 430 * g_in_s2 * 28 * 1.85**2 / (4 * math.pi**2) + 430 * 1 * (2 * 29 - 1)
    assert doc["moi_butt_g_in2"] == pytest.approx(i_butt, rel=1e-9)
    # 1 kg*cm^2 = 1000 g / 2.54^2 in^2 = 155.0003 g*in^2 (derived from the exact inch).
    assert doc["moi_butt_kg_cm2"] == pytest.approx(doc["moi_butt_g_in2"] / 155.0003, rel=1e-6)
    # Only the period is uncertain: u(I) = 2 u(T)/T * I_pivot (GUM eq. 12), expanded k = 2.
    i_pivot = i_butt - 430 * 1 * (2 * 29 - 1)
    assert doc["moi_butt_g_in2_u"] == pytest.approx(2 * 2 * 0.002 / 1.85 * i_pivot, rel=1e-5)


CLUB = ["--weight", "400", "--balance-point", "29"]
PENDULUM = [*CLUB, "--pivot", "1"]


def parts_argv(**override: str) -> list[str]:
    """Options for an invented 7-iron from parts, with some values replaced."""
    values = {"head": "260", "shaft": "120", "shaft_length": "41", "length": "37",
              "shaft_balance_point": "21", "grip": "50", **override}  # fmt: skip
    return [f"--{k.replace('_', '-')}={v}" for k, v in values.items()]


@pytest.mark.parametrize(
    ("argv", "names"),
    [
        (["--weight", "20x", "--balance-point", "29"], "--weight"),
        (["--weight", "nan", "--balance-point", "29"], "--weight"),
        (["--weight", "inf", "--balance-point", "29"], "--weight"),
        (["--weight", "1e400", "--balance-point", "29"], "--weight"),
        (["--weight=-412", "--balance-point", "29"], "--weight"),
        (["--weight", "412", "--balance-point=-inf"], "--balance-point"),
        (["--weight", "400", "--balance-point", "far"], "--balance-point"),
        ([*CLUB, "--target", "G10.5"], "--target"),
        ([*CLUB, "--target", "D1e1"], "--target"),
        ([*CLUB, "--target", "H3"], "--target"),
        ([*CLUB, "--target", "D12"], "--target"),
        ([*CLUB, "--target", "D-"], "--target"),
        ([*CLUB, "--target", "D2", "--at", "14"], "--at"),
        (["--support-a", "4", "--reading-a", "100"], "--support-b"),
        (["--weight", "400"], "--balance-point"),
        ([], "--weight"),
        ([*CLUB, "--display-step", "-1"], "--display-step"),
        ([*CLUB, "--period", "1.5"], "--pivot"),
        (["--weight", "0", "--balance-point", "29"], "total weight"),
        ([*PENDULUM, "--period", "1.5", "--amplitude", "200"], "--amplitude"),
        ([*PENDULUM, "--period", "nan"], "--period"),
        ([*PENDULUM, "--period=-1.5"], "period"),
        (parts_argv(head="-5"), "head"),
        (["--head", "260"], "--length"),
        ([*CLUB, "--extra", "5g@36"], "--extra"),
        ([*CLUB, "--length-change", "1"], "--length-change"),
        ([*parts_argv(), "--extra", "5g"], "--extra"),
        (parts_argv(shaft_balance_point="5"), "1/3 and 2/3"),
        (["--head", "260", "--weight", "400"], "--weight"),
        ([*CLUB, "--butt-gap-u", "1mm"], "--butt-gap-u"),
    ],
)
def test_bad_input_one_line_exit_2(
    argv: list[str], names: str, capsys: pytest.CaptureFixture[str]
) -> None:
    code, out, err = run_calc(argv, capsys)
    assert code == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("heft calc: error:")
    assert names in lines[0]


def test_bad_parts_file_names_the_key(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(PARTS_TOML.replace('mass = "120g"', 'mass = "heavy"'), encoding="utf-8")
    code, _, err = run_calc(["--parts", str(path)], capsys)
    assert code == 2 and "shaft.mass" in err
    path.write_text(PARTS_TOML.replace("[grip]", "[grip]\nweigth = 3"), encoding="utf-8")
    code, _, err = run_calc(["--parts", str(path)], capsys)
    assert code == 2 and "'weigth'" in err and "[grip]" in err
    path.write_text(PARTS_TOML.replace('mass = "120g"', "mass = nan"), encoding="utf-8")
    code, _, err = run_calc(["--parts", str(path)], capsys)  # TOML has nan and inf literals
    assert code == 2 and "shaft.mass" in err and "finite" in err
    path.write_text(PARTS_TOML.replace("at = 36", "at = inf"), encoding="utf-8")
    code, _, err = run_calc(["--parts", str(path)], capsys)
    assert code == 2 and "[[extra]] #1 at" in err
    path.write_text("length = [", encoding="utf-8")
    code, _, err = run_calc(["--parts", str(path)], capsys)
    assert code == 2 and "not valid TOML" in err


def test_installed_command_end_to_end() -> None:
    """Through ``python -m heft.tui.cli`` (the installed script's entry point), JSON on stdout."""
    done = subprocess.run(
        [sys.executable, "-m", "heft.tui.cli", "calc", "--weight", "412g",
         "--balance-point", "29.1in", "--target", "D2", "--at", "36.5", "--json"],
        capture_output=True, text=True, timeout=60, check=False,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    doc = json.loads(done.stdout)
    assert set(doc) >= BASE_KEYS | TARGET_KEYS
    bad = subprocess.run(
        [sys.executable, "-m", "heft.tui.cli", "calc", "--weight", "lots", "--balance-point", "29"],
        capture_output=True, text=True, timeout=60, check=False,
    )  # fmt: skip
    assert bad.returncode == 2
    assert bad.stderr.strip().count("\n") == 0 and "--weight" in bad.stderr


@pytest.mark.parametrize(
    ("u", "value_decimals", "text"),
    [(0.02485, 1, "0.025"), (0.0816, 1, "0.082"), (41.2, 0, "41"), (0.1, 2, "0.10"),
     (0.83, 1, "0.83"), (1863.4, 0, "1863"), (0.0, 2, "0.00")],
)  # fmt: skip
def test_uncertainty_digits(u: float, value_decimals: int, text: str) -> None:
    # Two significant digits suffice for an uncertainty (GUM, JCGM 100:2008, 7.2.6); never
    # fewer decimals than the value beside it, so a small one does not print as 0.0.
    assert calc.uncertainty_text(u, value_decimals) == text


def test_club_geometry_that_cannot_exist_is_refused(capsys: pytest.CaptureFixture[str]) -> None:
    # A balance point beyond the club's length, or a correction placed off the club: exit 2,
    # one line naming the option.
    assert main(["calc", *CLUB, "--length", "20", "--target", "D2"]) == 2
    assert "--length" in capsys.readouterr().err
    assert main(["calc", *CLUB, "--length", "37", "--target", "D2", "--at", "40"]) == 2
    assert "--at" in capsys.readouterr().err


def test_a_slipped_unit_suffix_draws_a_warning(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["calc", "--weight", "412kg", "--balance-point", "29"]) == 0
    assert "warning" in capsys.readouterr().err
    assert main(["calc", "--weight", "412g", "--balance-point", "29"]) == 0
    assert "warning" not in capsys.readouterr().err
