"""The simulated HID scale on the bench: what it shows, and `heft simulate hid_pos` reading it."""

from __future__ import annotations

import pytest

from heft.drivers.sim.hid_scale import hid_scale_samples
from heft.drivers.sim.physics import BenchTimeline, Club, Placement, make_geometry
from heft.tui.cli import main


def bench() -> BenchTimeline:
    return BenchTimeline(make_geometry("single"),
                         [Placement(Club(390.0, 29.5, "LCW-0001"), 1.0, 4.0)])


def test_zero_then_motion_then_stable_at_the_club_weight_then_zero() -> None:
    samples = hid_scale_samples(bench(), until_s=6.0, rate_hz=10.0, step_g=0.1)
    by_time = {round(t, 1): (w, status) for t, w, status in samples}
    assert by_time[0.5] == (0.0, "zero")
    assert by_time[1.1][1] == "motion"  # the club rings as it lands
    weight_g, status = by_time[3.9]
    assert status == "stable" and weight_g == pytest.approx(390.0)
    assert by_time[6.0] == (0.0, "zero")
    # Stable only after every shown value held within one step for the window (0.5 s).
    first_stable = min(t for t, _, s in samples if s == "stable")
    assert 1.5 <= first_stable < 3.9
    held = [w for t, w, _ in samples if first_stable - 0.45 <= t <= first_stable]
    assert max(held) - min(held) <= 0.1 + 1e-9


def test_bad_sampling_is_refused() -> None:
    with pytest.raises(ValueError, match="rate_hz"):
        hid_scale_samples(bench(), until_s=1.0, rate_hz=0.0)
    with pytest.raises(ValueError, match="channel 1"):
        hid_scale_samples(bench(), until_s=1.0, channel=1)


def test_heft_simulate_hid_pos_reads_the_scale_through_pyusb(
    capsys: pytest.CaptureFixture[str],
) -> None:
    # Real time: the club lands at 1.2 s and rests until 3.6 s; --duration ends the run.
    assert main(["simulate", "hid_pos", "--cycle", "4", "--duration", "5"]) == 0
    out = capsys.readouterr().out
    assert "1209:0001" in out and "kernel USB device" in out
    lines = [line.split() for line in out.splitlines() if line.endswith(("STABLE", "AT_ZERO"))]
    assert ["390.0", "g", "STABLE"] in [parts[2:] for parts in lines]
    assert ["0.0", "g", "STABLE|AT_ZERO"] in [parts[2:] for parts in lines]


@pytest.mark.parametrize("option", [["--link", "/tmp/hid0"], ["--geometry", "lever"]])
def test_hid_pos_refuses_port_options(option: list[str], capsys: pytest.CaptureFixture[str]
                                      ) -> None:
    with pytest.raises(SystemExit) as exc:
        main(["simulate", "hid_pos", *option])
    assert exc.value.code == 2
    assert option[0] in capsys.readouterr().err.splitlines()[-1]
