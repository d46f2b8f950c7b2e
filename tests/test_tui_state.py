"""The dashboard's pure parts: folding events into state, words for verdicts, the band gauge."""

from __future__ import annotations

from heft.daemon.events import AlarmKind, CaptureState, CaptureStateChanged, LiveReading
from heft.daemon.measurement import Verdict
from heft.drivers.reading import Flag
from heft.tui.calibration import live_text
from heft.tui.format import alarm_banner_text, capture_text, verdict_banner, with_u
from heft.tui.readout import gauge_text
from heft.tui.scripted_bench import JOB, STATION, out_of_spec_event, session_events
from heft.tui.set_view import latest_per_club, points_for
from heft.tui.state import Area, DashboardState, club_order_key
from heft.tui.tables import last_reading_text


def live(channel: str, value_g: float, *, station: str = STATION) -> LiveReading:
    return LiveReading(station=station, channel=channel, t_mono_s=1.0, value_g=value_g,
                       flags=Flag.NONE)


def test_session_folds_into_state() -> None:
    state = DashboardState()
    state.apply_all(session_events())
    assert state.station == STATION
    assert [m.club for m in state.measurements] == ["4i", "5i", "6i", "7i", "8i", "9i", "PW"]
    assert [m.verdict for m in state.measurements].count(Verdict.FAIL) == 1
    assert set(state.channels) == {"beam/0", "beam/1"}
    # The out-of-spec alarm was raised at 7i and cleared at 8i; two others stay active.
    kinds = {a.kind for a in state.active_alarms()}
    assert kinds == {AlarmKind.DEVICE_OFFLINE, AlarmKind.CALIBRATION_DUE}
    assert any(a.kind is AlarmKind.OUT_OF_SPEC for a in state.alarm_history)
    assert state.devices["scan"].connected is False
    assert state.current_job() == JOB


def test_other_stations_are_listed_not_shown() -> None:
    state = DashboardState("qc-1")
    state.apply(live("beam/0", 12.0, station="bench-1"))
    state.apply(live("scale/0", 400.0, station="qc-1"))
    assert state.stations == ["bench-1", "qc-1"]
    assert list(state.channels) == ["scale/0"]
    state.switch_station("bench-1")
    assert state.channels == {}
    assert state.stations == ["bench-1", "qc-1"]


def test_repeated_measurement_id_is_ignored() -> None:
    state = DashboardState()
    event = out_of_spec_event()
    state.apply(event)
    state.add_measurement(event.measurement)  # e.g. the same row again from the back-fill
    assert len(state.measurements) == 1


def test_fail_banner_names_the_check_and_direction() -> None:
    banner = verdict_banner(out_of_spec_event().measurement)
    assert banner.word == "FAIL"
    assert banner.css_class == "fail"
    assert "swing weight D3.7 ABOVE D1.5-D2.5 by 1.20 pt" in banner.reason
    assert verdict_banner(None).word == "WAITING"


def test_alarm_banner_has_words_and_count() -> None:
    state = DashboardState()
    state.apply_all(session_events())
    text = alarm_banner_text(state.unacknowledged())
    assert text.startswith("ALARM")
    assert text.startswith("ALARM 1 of 2 [a: acknowledge]  DEVICE OFFLINE - scan:")
    assert alarm_banner_text([]) == ""


def test_gauge_marks_a_fail_in_words() -> None:
    check = out_of_spec_event().measurement.checks[0]
    plain = gauge_text("swing weight", check, 60).plain
    lines = plain.split("\n")
    assert "ABOVE" in lines[2]
    assert "D1.5" in lines[3] and "D2.5" in lines[3]
    # The marker sits to the right of the band's high edge.
    assert lines[2].index("▲") > lines[1].rindex("┃")


def test_value_with_uncertainty() -> None:
    assert with_u(412.345, 0.14, 1, "g") == "412.3 ± 0.1 g"
    assert with_u(412.345, None, 1, "g") == "412.3 g"
    assert with_u(None, None, 1, "g") == "-"


def test_clubs_sort_as_a_set_reads() -> None:
    clubs = ["PW", "9i", "SW", "4-iron", "10i", "GW", "3H", "5W", "odd", "7 iron"]
    assert sorted(clubs, key=club_order_key) == [
        "5W", "3H", "4-iron", "7 iron", "9i", "10i", "PW", "GW", "SW", "odd"
    ]


def test_set_points_keep_the_latest_of_each_club() -> None:
    events = session_events()
    state = DashboardState()
    state.apply_all(events)
    redo = out_of_spec_event(seq=50)  # 7i measured again
    state.apply(redo)
    latest = latest_per_club(list(state.measurements))
    assert len(latest) == 7
    seven = next(m for m in latest if m.club == "7i")
    assert seven.seq == 50
    centred = points_for(list(state.measurements), "total_weight", centred=True)
    for p in centred:
        assert p.low is not None and p.high is not None
        assert abs(p.low + p.high) < 1e-9  # centred on the band


def test_settling_shows_the_load_now_not_the_load_at_detection() -> None:
    settling = CaptureStateChanged(station=STATION, state=CaptureState.SETTLING, t_mono_s=1.0,
                                   detail="load 33.0 g")
    assert capture_text(settling, 392.04) == "SETTLING - hands off (load 392.0 g)"
    assert capture_text(settling, None) == "SETTLING - hands off"
    holding = CaptureStateChanged(station=STATION, state=CaptureState.HOLDING, t_mono_s=2.0,
                                  detail="not a club: too light")
    assert capture_text(holding, 5.0).endswith("(not a club: too light)")
    state = DashboardState()
    state.apply(live("beam/0", 120.5))
    state.apply(live("beam/1", 271.5))
    assert state.load_g() == 392.0
    assert state.device_reading_g("beam") == 120.5
    assert state.device_reading_g("scan") is None


def test_device_last_reading_has_a_unit() -> None:
    assert last_reading_text(44881.0, None) == "44881 counts"
    assert last_reading_text(44881.0, 120.456) == "120.46 g"
    assert last_reading_text(None, None) == "-"


def test_zero_step_tells_the_operator_to_lift_a_club() -> None:
    loaded = live_text("beam/0", 392.0, "step-zero").plain
    assert "392.00 g" in loaded and "lift the club" in loaded
    assert "lift" not in live_text("beam/0", 0.4, "step-zero").plain
    assert "lift" not in live_text("beam/0", 392.0, "step-span").plain  # the mass is meant to be on


def test_read_only_alarm_banner_does_not_offer_acknowledge() -> None:
    state = DashboardState()
    state.apply_all(session_events())
    text = alarm_banner_text(state.unacknowledged(), can_acknowledge=False)
    assert text.startswith("ALARM 1 of 2 (read-only)")
    assert "acknowledge" not in text


def test_apply_names_the_areas_an_event_changed() -> None:
    events = session_events()
    state = DashboardState()
    assert state.apply(events[0]) == {Area.STATIONS, Area.DEVICES}  # the first station heard
    assert state.apply(live("beam/0", 12.0)) == {Area.LIVE}
    assert state.apply(live("scale/0", 1.0, station="qc-1")) == {Area.STATIONS}  # only listed
    assert state.apply(live("scale/0", 2.0, station="qc-1")) == set()
    captured = out_of_spec_event()
    assert state.apply(captured) == {Area.MEASUREMENTS}
    assert state.apply(captured) == set()  # the same id again changes nothing
    assert state.apply_all(events[2:5]) == {Area.ALARMS, Area.CAPTURE}
