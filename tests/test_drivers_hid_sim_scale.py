"""The simulated HID scale built from weights, read through pyusb, the transport and hid_pos.

Also: a HID session recorded and replayed in the heft recording format, and a replugged scale.
Ounce conversions use the exact international avoirdupois ounce (1959 agreement).
"""

from __future__ import annotations

import asyncio
from pathlib import Path

import pytest

from heft.drivers.base import TransportError
from heft.drivers.fake_usb import fake_scale_backend_from_weights
from heft.drivers.protocols.hid_pos import HidPosDriver
from heft.drivers.reading import Flag, Reading
from heft.drivers.transport import open_transport
from heft.drivers.usb_transport import UsbHidTransport, set_default_backend
from tests.test_drivers_hid_pos import (
    GRAMS_PER_OUNCE,
    PID,
    VID,
    read_all,
    sequence_backend,
)

# -- the simulated scale builder ---------------------------------------------------------------


async def test_simulated_scale_from_weights_through_pyusb() -> None:
    samples: list[tuple[float, float, str | int]] = [
        (0.0, 0.0, "zero"), (0.1, 180.26, "motion"), (0.2, 402.04, "stable"),
        (0.3, -3.0, "stable"), (0.4, 7000.0, "stable"), (0.5, 402.04, 4)]
    backend = fake_scale_backend_from_weights(samples, pace="virtual", end="hold",
                                              vid=0x1209, pid=0x0001)
    transport = UsbHidTransport(0x1209, 0x0001, backend=backend)
    driver = HidPosDriver("sim")
    await transport.open()
    try:
        readings = await read_all(transport, driver, 8)  # 6 samples, then the hold repeats
    finally:
        await transport.close()
    assert [r.value for r in readings] == pytest.approx(
        [0.0, 180.3, 402.0, 0.0, 6553.5, 402.0, 402.0, 402.0])
    assert [r.flags for r in readings[:5]] == [
        Flag.STABLE | Flag.AT_ZERO, Flag.MOTION, Flag.STABLE, Flag.UNDERLOAD, Flag.OVERLOAD]


async def test_simulated_scale_in_ounces_real_time() -> None:
    backend = fake_scale_backend_from_weights(
        [(0.0, 390.0894382, "stable"), (0.5, 0.0, "zero")], unit="oz", exponent=-2,
        pace="realtime", end="silent")
    transport = UsbHidTransport(0x1209, 0x0001, backend=backend, read_timeout_ms=100)
    driver = HidPosDriver("sim")
    await transport.open()
    try:
        first, second = await read_all(transport, driver, 2)
    finally:
        await transport.close()
    assert first.device_unit == "oz"
    assert first.value == pytest.approx(13.76 * GRAMS_PER_OUNCE)
    assert second.flags == Flag.STABLE | Flag.AT_ZERO


def test_simulated_scale_rejects_bad_input() -> None:
    with pytest.raises(ValueError, match="status 'wobbly'"):
        fake_scale_backend_from_weights([(0.0, 1.0, "wobbly")])
    with pytest.raises(ValueError, match="unit 'stone'"):
        fake_scale_backend_from_weights([(0.0, 1.0, "stable")], unit="stone")


async def test_simulated_scale_loops_and_reaches_the_defaultsequence_backend() -> None:
    backend = fake_scale_backend_from_weights(
        [(0.0, 100.0, "stable"), (0.1, 200.0, "stable")], pace="virtual", end="loop")
    set_default_backend(backend)
    try:
        transport = open_transport("usb-hid://1209:0001", {})
        await transport.open()
        try:
            values = [HidPosDriver("s").feed(await transport.read(), 0.0)[0] for _ in range(5)]
        finally:
            await transport.close()
    finally:
        set_default_backend(None)
    assert [v.value for v in values if isinstance(v, Reading)] == pytest.approx(
        [100.0, 200.0, 100.0, 200.0, 100.0])


async def test_real_time_host_that_reads_late_gets_only_the_newest_report() -> None:
    # Like an interrupt endpoint: the scale answers a poll with its current report.
    samples: list[tuple[float, float, str | int]] = [
        (0.0, 10.0, "motion"), (0.01, 20.0, "motion"), (0.02, 30.0, "stable")]
    backend = fake_scale_backend_from_weights(samples, pace="realtime", end="silent")
    transport = UsbHidTransport(0x1209, 0x0001, backend=backend, read_timeout_ms=100)
    await transport.open()
    try:
        await asyncio.sleep(0.3)
        [reading] = await read_all(transport, HidPosDriver("s"), 1)
    finally:
        await transport.close()
    assert reading.value == pytest.approx(30.0)
    assert backend.device.reports_sent == 1


async def test_a_hid_session_records_and_replays_in_the_heft_recording_format(
    tmp_path: Path,
) -> None:
    # One interrupt transfer = one chunk, so a replay feeds the driver the same whole reports.
    from heft.drivers.recording import (
        RecordingHeader,
        RecordingTransport,
        RecordingWriter,
        read_recording,
        replay_outputs,
    )

    path = tmp_path / "hid.jsonl"
    header = RecordingHeader(device="bench-1-scale", driver="hid_pos", binary=True)
    live_driver = HidPosDriver("bench-1-scale")
    with RecordingWriter(path, header) as writer:
        transport = RecordingTransport(
            UsbHidTransport(VID, PID, backend=sequence_backend("garbled_reports")), writer)
        await transport.open()
        try:
            live = [o for _ in range(11)
                    for o in live_driver.feed(await transport.read(), 0.0)]
            await transport.write(live_driver.command("zero"))
        finally:
            await transport.close()
    recording = read_recording(path)
    assert [c.data for c in recording.chunks if c.direction == "tx"] == [b"\x02\x01"]
    replay_driver = HidPosDriver("bench-1-scale")
    replayed = replay_outputs(recording, replay_driver)
    assert [(r.value, r.flags, r.raw) for r in replayed if isinstance(r, Reading)] == [
        (r.value, r.flags, r.raw) for r in live if isinstance(r, Reading)]
    assert len(replayed) == 2
    assert replay_driver.stats.frame_errors == live_driver.stats.frame_errors == 9


async def test_a_replugged_scale_can_be_opened_again() -> None:
    backend = sequence_backend("unplug_mid_stream")
    transport = UsbHidTransport(VID, PID, backend=backend)
    await transport.open()
    await read_all(transport, HidPosDriver("s"), 3)
    with pytest.raises(TransportError):
        await transport.read()
    await transport.close()
    with pytest.raises(TransportError, match="no such USB device"):
        await UsbHidTransport(VID, PID, backend=backend).open()
    backend.device.replug()
    again = UsbHidTransport(VID, PID, backend=backend)
    await again.open()
    try:
        [reading] = await read_all(again, HidPosDriver("s"), 1)  # the event after the unplug
    finally:
        await again.close()
    assert reading.value == pytest.approx(310.2)
    assert backend.device.kernel_driver_attached == {0: True}
