"""Operator commands of a running station, carried out on the pipeline and the calibration part.

The service hands every :mod:`heft.daemon.command_api` command here and sends the reply back.
What a command may change of the pipeline is named by :class:`CommandPipeline`; outputs a
command causes (a tare restarting a capture, a balance point completing a club) go back to the
service through ``route``, like any pipeline step's outputs.
"""

from __future__ import annotations

from collections.abc import Awaitable, Callable, Iterable, Mapping
from typing import Any, Protocol

from heft.daemon import command_api as api
from heft.daemon.alarms import AlarmManager, UnknownAlarmError
from heft.daemon.calibration import CalibrationError
from heft.daemon.calibration_workflow import CalibrationWorkflow, StepResult
from heft.daemon.events import MeasurementCaptured
from heft.daemon.pipeline import PipelineOutput, SelectionError, Tared
from heft.daemon.records import ReferenceMass
from heft.daemon.storage import StorageError
from heft.drivers.base import TransportError, UnsupportedCommand


class CommandPipeline(Protocol):
    """What operator commands read of and change on the pipeline (``BenchPipeline`` is one)."""

    @property
    def job(self) -> str | None: ...

    @property
    def spec_name(self) -> str | None: ...

    @property
    def club(self) -> str | None: ...

    @property
    def club_id(self) -> str | None: ...

    @property
    def entered_balance_point_in(self) -> float | None: ...

    def tare(self, device: str | None, window_s: float = 0.5) -> Tared: ...

    def rearm(self) -> list[PipelineOutput]: ...

    def select_job(self, job: str) -> None: ...

    def select_spec(self, spec: str, club: str | None = None) -> None: ...

    def set_club_id(self, club_id: str) -> None: ...

    def set_balance_point(
        self, value: str | float, t_mono_s: float | None = None
    ) -> list[PipelineOutput]: ...


class StationCommands:
    """Carries out commands; :meth:`handle` always returns a Reply.

    Args:
        pipeline: The station's pipeline, through :class:`CommandPipeline`.
        calibration: The calibration part (zero, span, verify).
        alarms: The station's alarms (acknowledgements).
        route: Takes the outputs a command caused, as the service routes a pipeline step's.
        drivers: Driver name of each device, by device name.
        zero_scale: Sends a scale its own zero command (TransportError when not connected,
            SelectionError when the scale refuses).
    """

    def __init__(
        self,
        pipeline: CommandPipeline,
        calibration: CalibrationWorkflow,
        alarms: AlarmManager,
        route: Callable[[Iterable[PipelineOutput]], None],
        drivers: Mapping[str, str],
        zero_scale: Callable[[str], Awaitable[None]],
    ) -> None:
        self._pipeline = pipeline
        self._calibration = calibration
        self._alarms = alarms
        self._route = route
        self._drivers = drivers
        self._zero_scale = zero_scale

    async def handle(self, cmd: api.Command) -> api.Reply:
        """Carry out one command; ok=False naming what was wrong when it cannot be done."""
        echo = {"command": cmd.command, "request_id": cmd.request_id, "operator": cmd.operator}
        try:
            message, data = await self._execute(cmd)
        except (SelectionError, CalibrationError, UnknownAlarmError, UnsupportedCommand) as err:
            text = str(err) if not isinstance(err, KeyError) else f"no active alarm {err.args[0]!r}"
            return api.Reply(ok=False, **echo, message=text)
        except (TransportError, StorageError) as err:
            return api.Reply(ok=False, **echo, message=str(err))
        return api.Reply(ok=True, **echo, message=message, data=data)

    def _caused(self, outputs: Iterable[PipelineOutput], operator: str | None) -> None:
        """Route a command's outputs; a measurement it completed names the operator who sent it."""
        self._route(
            MeasurementCaptured(measurement=o.measurement.model_copy(update={"operator": operator}))
            if operator is not None and isinstance(o, MeasurementCaptured)
            else o
            for o in outputs
        )

    async def _execute(self, cmd: api.Command) -> tuple[str, dict[str, Any]]:
        p = self._pipeline
        if isinstance(cmd, api.Ping):
            return "pong", {}
        if isinstance(cmd, api.Tare):
            tared = p.tare(self._known_device(cmd.device))
            self._caused(tared.outputs, cmd.operator)
            return f"tared {', '.join(tared.channels)}", {"channels": tared.channels}
        if isinstance(cmd, api.Zero):
            return await self._zero(cmd.device, cmd.operator)
        if isinstance(cmd, api.Rearm):
            self._caused(p.rearm(), cmd.operator)
            return "re-armed", {}
        if isinstance(cmd, api.SelectJob):
            p.select_job(cmd.job)
            return f"job {p.job} (spec {p.spec_name})", {"job": p.job, "spec": p.spec_name}
        if isinstance(cmd, api.SelectSpec):
            p.select_spec(cmd.spec, cmd.club)
            return f"spec {p.spec_name}", {"spec": p.spec_name, "club": p.club}
        if isinstance(cmd, api.SetClubId):
            p.set_club_id(cmd.club_id)
            return f"next club is {p.club_id}", {"club_id": p.club_id}
        if isinstance(cmd, api.SetBalancePoint):
            self._caused(p.set_balance_point(cmd.balance_point), cmd.operator)
            bp = p.entered_balance_point_in
            return f"balance point {bp:.2f} in set", {"balance_point_in": bp}
        if isinstance(cmd, api.AcknowledgeAlarm):
            alarm = self._alarms.acknowledge(cmd.key)
            return f"acknowledged {alarm.key}", {"key": alarm.key}
        return await self._calibrate(cmd)

    def _known_device(self, device: str | None) -> str | None:
        if device is not None and device not in self._drivers:
            raise SelectionError(f"no device {device!r}; devices: {', '.join(self._drivers)}")
        return device

    async def _zero(self, device: str | None, operator: str | None) -> tuple[str, dict[str, Any]]:
        """Zero a scale with its own command; load-cell channels are zeroed by a tare."""
        names = [self._known_device(device)] if device is not None else list(self._drivers)
        done: list[str] = []
        for name in names:
            assert name is not None
            driver = self._drivers[name]
            if driver == "scanner":
                continue
            if driver != "beam":
                await self._zero_scale(name)
            else:
                self._caused(self._pipeline.tare(name).outputs, operator)
            done.append(name)
        return f"zeroed {', '.join(done)}", {"devices": done}

    async def _calibrate(
        self, cmd: api.CalibrateZero | api.CalibrateSpan | api.VerifyCheckMass
    ) -> tuple[str, dict[str, Any]]:
        """A calibration step, done by the calibration part."""
        operator = cmd.operator or ""
        if isinstance(cmd, api.CalibrateZero):
            done: StepResult = await self._calibration.zero(cmd.channel, operator)
        else:
            reference = ReferenceMass(
                mass_g=cmd.mass_g, weight_class=cmd.weight_class, weight_id=cmd.weight_id
            )
            if isinstance(cmd, api.CalibrateSpan):
                done = await self._calibration.span(cmd.channel, reference, operator)
            else:
                done = await self._calibration.verify(
                    cmd.channel, reference, cmd.tolerance_g, operator
                )
        data: dict[str, Any] = {"calibration": done.record.model_dump(mode="json")}
        if done.record.kind == "verify":
            data["passed"] = done.record.passed
        return done.message, data
