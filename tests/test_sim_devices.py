"""Simulated device behaviour in virtual time: commands, modes, faults, determinism."""

from __future__ import annotations

import itertools
import json
import re
from pathlib import Path

import pytest

from heft.drivers.sim.definitions import (
    DEFINITIONS_DIR,
    BeamDef,
    DefinitionError,
    PollBalanceDef,
    ScannerDef,
    StreamBalanceDef,
    builtin_definition,
    builtin_of,
    load_definition,
    parse_definition,
)
from heft.drivers.sim.devices import (
    BeamDevice,
    PollBalance,
    ScannerDevice,
    StreamBalance,
    make_device,
    nice_step,
)
from heft.drivers.sim.physics import (
    BenchTimeline,
    Club,
    Dynamics,
    Placement,
    SingleScale,
    TwoSupports,
)

CLUB = Club(390.0, 29.5, "LCW-0007")  # invented
QUIET = Dynamics(frequency_hz=5.0, damping_ratio=0.5, overshoot=0.1)


def _single(t_on: float = 1.0, t_off: float = 6.0, club: Club = CLUB) -> BenchTimeline:
    return BenchTimeline(SingleScale(), [Placement(club, t_on, t_off)], QUIET)


def _texts(frames: list[tuple[float, bytes]]) -> list[str]:
    return [f.decode() for _, f in frames]


def _poll(noise_g: float = 0.0, **kw: object) -> PollBalance:
    d = builtin_definition("poll_balance")
    assert isinstance(d, PollBalanceDef)
    dev = PollBalance(d.model_copy(update={"noise_g": noise_g, **kw}), _single(), seed=1)
    dev.boot(0.0)
    return dev


def test_poll_balance_answers_s_si_z_t_at_and_unknown() -> None:
    dev = _poll()
    dev.advance(0.9)
    assert _texts(dev.command(b"S", 0.9)) == ["S S       0.00 g\r\n"]
    dev.advance(4.0)  # club placed at 1.0 s, settled well before 4 s
    assert _texts(dev.command(b"S", 4.0)) == ["S S     390.00 g\r\n"]
    assert _texts(dev.command(b"SI", 4.0)) == ["S S     390.00 g\r\n"]
    # 390 g is 17.7 % of 2200 g: outside the 4 % zero range.
    assert _texts(dev.command(b"Z", 4.0)) == ["Z +\r\n"]
    assert _texts(dev.command(b"T", 4.0)) == ["T S     390.00 g\r\n"]
    dev.advance(4.5)
    assert _texts(dev.command(b"S", 4.5)) == ["S S       0.00 g\r\n"]  # net after tare
    assert _texts(dev.command(b"@", 4.5)) == ['I4 A "PB22-004417"\r\n']
    assert _texts(dev.command(b"XYZ", 4.5)) == ["ES\r\n"]


def test_poll_balance_s_waits_for_stability_and_si_does_not() -> None:
    dev = _poll()
    dev.advance(1.15)  # ringing just after placement (last sample at 1.1 s)
    assert _texts(dev.command(b"SI", 1.15))[0].startswith("S D ")
    assert dev.command(b"S", 1.15) == []  # pending until stable
    later = dev.advance(3.0)
    assert len(later) == 1
    t, frame = later[0]
    assert frame == b"S S     390.00 g\r\n" and 1.2 < t < 2.5


def test_poll_balance_s_times_out_with_s_i_when_it_never_settles() -> None:
    ringing = BenchTimeline(
        SingleScale(), [Placement(CLUB, 1.0, 9.0)], Dynamics(damping_ratio=0.01)
    )
    d = builtin_definition("poll_balance")
    dev = PollBalance(d, ringing, seed=1)  # type: ignore[arg-type]
    dev.boot(0.0)
    dev.advance(1.5)
    assert dev.command(b"S", 1.5) == []
    frames = dev.advance(5.0)
    assert _texts(frames) == ["S I\r\n"]
    assert frames[0][0] == pytest.approx(3.5, abs=0.11)  # stable_timeout_s = 2.0


def test_poll_balance_zero_in_range_and_continuous_mode() -> None:
    light = Club(50.0, 20.0)  # 50 g is 2.3 % of capacity: zero accepts it
    d = builtin_definition("poll_balance").model_copy(update={"noise_g": 0.0})
    dev = PollBalance(d, _single(club=light), seed=1)  # type: ignore[arg-type]
    dev.boot(0.0)
    dev.advance(3.0)
    assert _texts(dev.command(b"Z", 3.0)) == ["Z A\r\n"]
    dev.advance(3.5)
    assert _texts(dev.command(b"SI", 3.5)) == ["S S       0.00 g\r\n"]
    assert dev.command(b"SIR", 3.5) == []
    stream = dev.advance(4.5)
    assert len(stream) == 10  # 10 samples/s
    assert all(re.fullmatch(r"S [SD] +-?\d+\.\d\d g\r\n", s) for s in _texts(stream))
    assert _texts(dev.command(b"@", 4.5)) == ['I4 A "PB22-004417"\r\n']
    assert dev.advance(5.5) == []  # `@` stopped the continuous send


def test_poll_balance_not_stable_refuses_zero_and_tare() -> None:
    dev = _poll()
    dev.advance(1.15)
    assert _texts(dev.command(b"Z", 1.15)) == ["Z I\r\n"]
    assert _texts(dev.command(b"T", 1.15)) == ["T I\r\n"]


def test_overload_above_capacity_plus_nine_steps() -> None:
    heavy = Club(2300.0, 20.0)  # above the 2200 g capacity
    d = builtin_definition("poll_balance")
    dev = PollBalance(d, _single(club=heavy), seed=1)  # type: ignore[arg-type]
    dev.boot(0.0)
    dev.advance(4.0)
    assert _texts(dev.command(b"SI", 4.0)) == ["S +\r\n"]
    s = builtin_definition("stream_balance")
    sdev = StreamBalance(s.model_copy(update={"capacity_g": 300.0}), _single(), seed=1)  # type: ignore[arg-type]
    sdev.boot(0.0)
    assert _texts(sdev.advance(4.0))[-1] == "OL,GS,+9999999   g\r\n"


def test_stream_balance_streams_tares_and_changes_unit() -> None:
    d = builtin_definition("stream_balance")
    assert isinstance(d, StreamBalanceDef)
    dev = StreamBalance(d.model_copy(update={"noise_g": 0.0}), _single(), seed=2)
    dev.boot(0.0)
    frames = dev.advance(4.0)
    assert len(frames) == 41  # 10 lines/s from t = 0 to 4.0 inclusive
    assert frames[-1][1] == b"ST,GS,+00390.00   g\r\n"
    assert any(f.startswith(b"US,") for _, f in frames)  # moving while it rang
    dev.command(b"T", 4.0)
    assert dev.advance(4.5)[-1][1] == b"ST,NT,+00000.00   g\r\n"
    dev.tare_g = 0.0
    dev.set_unit("oz")
    assert dev.step == 0.0005  # 0.01 g = 0.00035 oz, rounded up to a 1-2-5 step
    assert dev.advance(5.0)[-1][1] == b"ST,GS,+013.7570  oz\r\n"  # 390 g = 13.757 oz
    assert _texts(dev.command(b"R", 5.0)) == ["ST,GS,+013.7570  oz\r\n"]


def test_nice_step() -> None:
    assert [nice_step(x) for x in (0.01, 0.00035, 0.0014, 0.03, 7.0)] == [
        0.01, 0.0005, 0.002, 0.05, 10.0]


def _beam(geo: TwoSupports | None = None, **update: object) -> BeamDevice:
    d = builtin_definition("beam")
    assert isinstance(d, BeamDef)
    tl = BenchTimeline(geo or TwoSupports(4.0, 36.0), [Placement(CLUB, 1.0, 6.0)], QUIET)
    dev = BeamDevice(d.model_copy(update={"noise_g": 0.0, "drift_g_per_s": 0.0, **update}),
                     tl, seed=3)
    dev.boot(0.0)
    return dev


def _sample_fields(frame: bytes) -> list[int]:
    body = frame[1:frame.index(b"*")].decode()
    return [int(x) for x in body.split(",")]


def test_beam_boots_with_banner_hello_then_samples_with_seq_and_device_time() -> None:
    dev = _beam(clock_ppm=0.0)
    frames = dev.advance(1.0)
    texts = _texts(frames)
    assert texts[:3] == ["\r\n", "heft-beam boot\r\n", "hx711: 2 channels, gain 128\r\n"]
    assert texts[3].startswith("#HELLO heft-beam/1 fw=hb-0.3.1 ch=2 rate=80 bits=24 ")
    samples = [f for _, f in frames if f.startswith(b"$")]
    seqs = [_sample_fields(f)[0] for f in samples]
    assert seqs == list(range(len(seqs)))
    times = [_sample_fields(f)[1] for f in samples]
    steps = {b - a for a, b in itertools.pairwise(times)}
    assert steps <= {12, 13}  # 80 samples/s = 12.5 ms
    assert frames[3][0] == pytest.approx(0.306)


def test_beam_counts_follow_counts_per_gram_and_offset() -> None:
    dev = _beam()
    frames = dev.advance(5.0)
    _, _, c0, c1 = _sample_fields(frames[-1][1])
    d = dev.definition
    # Static forces on supports at 4 and 36 in (see test_sim_physics): 79.21875 and 310.78125 g.
    assert (c0 - d.channels[0].offset_counts) / d.channels[0].counts_per_g == pytest.approx(
        79.21875, abs=0.01)
    assert (c1 - d.channels[1].offset_counts) / d.channels[1].counts_per_g == pytest.approx(
        310.78125, abs=0.01)


def test_beam_saturates_at_the_ends_of_the_adc_range() -> None:
    dev = _beam(adc_bits=16)  # 418.73 counts/g * 79 g is far beyond 32767
    frames = dev.advance(5.0)
    _, _, c0, c1 = _sample_fields(frames[-1][1])
    assert (c0, c1) == (32767, 32767)


def test_beam_commands_id_rate_reboot_and_errors() -> None:
    dev = _beam()
    dev.advance(2.0)
    reply = _texts(dev.command(b"!ID", 2.0))
    assert reply[0] == "#OK ID*2CCC\n" and reply[1].startswith("#HELLO heft-beam/1")
    reply = _texts(dev.command(b"!RATE 10", 2.0))
    assert reply[0].startswith("#OK RATE 10*") and " rate=10 " in reply[1]
    samples = dev.advance(3.0)
    assert len(samples) == 10  # now 10 samples/s
    assert _texts(dev.command(b"!RATE 25", 3.0))[0].startswith("#ERR RATE expects 10 or 80*")
    assert _texts(dev.command(b"!FOO", 3.0))[0].startswith("#ERR unknown command !FOO*")
    assert _texts(dev.command(b"!REBOOT", 3.0)) == ["#OK REBOOT*ED76\n"]
    after = _texts(dev.advance(3.2))
    assert after == []  # silent while it boots (0.3 s)
    after = _texts(dev.advance(3.5))
    assert after[1] == "heft-beam boot\r\n"
    assert after[3].startswith("#HELLO heft-beam/1") and " rate=10 " in after[3]
    first_sample = next(s for s in after if s.startswith("$"))
    assert first_sample.startswith("$0,")  # seq restarts after a reboot


def test_silent_fault_stops_output_and_replies() -> None:
    dev = _beam()
    assert dev.advance(1.0)
    dev.silent = True
    assert dev.advance(2.0) == []
    assert dev.command(b"!ID", 2.0) == []
    dev.silent = False
    assert dev.advance(2.1)


def test_scanner_scans_each_placed_club_before_it_lands() -> None:
    tl = BenchTimeline(SingleScale(), [Placement(CLUB, 3.0, 5.0),
                                       Placement(Club(400, 29, "LCW-0008"), 7.0, 9.0)])
    d = builtin_definition("scanner")
    assert isinstance(d, ScannerDef)
    dev = ScannerDevice(d, tl)
    dev.boot(0.0)
    frames = dev.advance(10.0)
    assert [(round(t, 3), f) for t, f in frames] == [(2.0, b"LCW-0007\r\n"),
                                                     (6.0, b"LCW-0008\r\n")]
    late = ScannerDevice(d, tl)
    late.boot(4.0)  # plugged in after the first scan: it is not replayed
    assert [f for _, f in late.advance(10.0)] == [b"LCW-0008\r\n"]


def test_same_seed_same_bytes_other_seed_other_bytes() -> None:
    def run(seed: int) -> list[tuple[float, bytes]]:
        d = builtin_definition("beam")
        tl = BenchTimeline(TwoSupports(), [Placement(CLUB, 1.0, 3.0)])
        dev = make_device(d, tl, seed=seed)
        dev.boot(0.0)
        return dev.advance(4.0)

    assert run(11) == run(11)
    assert run(11) != run(12)


def test_a_device_on_a_missing_bench_channel_is_refused() -> None:
    d = builtin_definition("stream_balance").model_copy(update={"bench_channel": 1})
    with pytest.raises(ValueError, match="bench_channel 1"):
        make_device(d, _single())


# --- definitions as data ---------------------------------------------------------------------


def test_every_shipped_definition_loads() -> None:
    for name in ("poll_balance", "stream_balance", "regex_line", "beam", "beam_1ch", "scanner"):
        assert builtin_definition(name).spec == 1


def test_spec_mismatch_is_named(tmp_path: Path) -> None:
    raw = json.loads((DEFINITIONS_DIR / "beam.json").read_text())
    raw["spec"] = 2
    path = tmp_path / "beam_v2.json"
    path.write_text(json.dumps(raw))
    with pytest.raises(DefinitionError, match=r"beam_v2\.json: device definition spec 2 is not "
                                              r"supported; this heft reads spec 1"):
        load_definition(path)
    with pytest.raises(DefinitionError, match='missing "spec"'):
        parse_definition({"protocol": "beam"})


def test_bad_fields_are_named() -> None:
    with pytest.raises(DefinitionError, match="field rate_hz"):
        parse_definition({"spec": 1, "protocol": "stream_balance", "name": "x", "rate_hz": -1,
                          "capacity_g": 100})
    with pytest.raises(DefinitionError, match="protocol 'morse' unknown"):
        parse_definition({"spec": 1, "protocol": "morse"})
    with pytest.raises(DefinitionError, match="field wobble"):
        parse_definition({"spec": 1, "protocol": "scanner", "name": "s", "wobble": 1})
    with pytest.raises(DefinitionError, match="no device definition 'nope'"):
        builtin_definition("nope")
    assert builtin_of("beam_1ch", BeamDef).channels[0].bench_channel == 0
    with pytest.raises(DefinitionError, match="'scanner' is a scanner device, expected BeamDef"):
        builtin_of("scanner", BeamDef)


def test_regex_line_scale_streams_or_answers_its_poll_string() -> None:
    d = builtin_definition("regex_line").model_copy(update={"noise_g": 0.0})
    dev = make_device(d, _single())
    dev.boot(0.0)
    frames = dev.advance(4.0)
    assert len(frames) == 21  # 5 lines/s from 0 to 4.0 s inclusive
    assert frames[-1][1] == b"WT ST     390.0 g\r\n"
    pattern = re.compile(d.driver_options["pattern"])  # type: ignore[union-attr]
    assert all(pattern.fullmatch(f.decode().rstrip("\r\n")) for _, f in frames)
    polled = make_device(d.model_copy(update={"poll": "P", "terminator": "\n"}), _single())
    polled.boot(0.0)
    assert polled.advance(4.0) == []
    assert _texts(polled.command(b"P", 4.0)) == ["WT ST     390.0 g\n"]
    assert polled.command(b"Q", 4.0) == []
    heavy = make_device(d.model_copy(update={"capacity_g": 200.0}), _single())
    heavy.boot(0.0)
    assert heavy.advance(4.0)[-1][1] == b"WT OL\r\n"
