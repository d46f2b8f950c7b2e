"""Commented example station configs, one per bench geometry (``heft config example``).

Each example is a complete, valid config (a test runs ``heft config check`` on every one). The
station, devices and specs belong to the invented maker Larkspur Clubworks.
"""

from __future__ import annotations

from typing import Final

_HEAD: Final = """\
# heft station config ({geometry}). Check it with:  heft config check station.toml
# Lengths take in/mm/cm suffixes ("36in", "914mm"); masses g/oz/kg ("390g", "13.7oz").
# Bare numbers are inches and grams.

station = "bench-1"            # station id: MQTT topics, records, the dashboard
job = "larkspur-irons-2026"    # active job at start (a command can change it)
# spec = "irons-d2"            # or an active spec without a job
# club = "7i"                  # club of the set whose per-club targets apply

[storage]
path = "heft.db"               # SQLite file; relative paths start at this file's folder
"""

_TWO_SUPPORT: Final = """
# Two load cells under one beam, read by a microcontroller speaking the heft beam protocol.
[[devices]]
name = "beam"
driver = "beam"
port = "/dev/heft-beam"        # a udev name (deploy/99-heft.rules) or /dev/serial/by-id/...
baudrate = 115200

# Optional: a barcode scanner tags the next club with its id.
# [[devices]]
# name = "scanner"
# driver = "scanner"
# port = "/dev/heft-scanner"

[geometry]
type = "two_support"
channel_a = "beam/0"           # support nearer the butt
position_a_in = "4in"          # from the butt stop
channel_b = "beam/1"           # support nearer the head
position_b_in = "36in"
position_u_in = 0.02           # standard uncertainty of each support position (in)

# Load-cell channels turn counts into grams with the database's latest calibration
# (the dashboard's calibration flow, key c, or the calibrate_* MQTT commands)
# or with numbers given here (source = "config").
[channels."beam/0"]
source = "database"
calibration_interval_days = 90
calibration_warn_days = 7

[channels."beam/1"]
source = "database"

# Capture: when is a club settled? A preset plus overrides; see docs/service.md.
[capture]
preset_name = "hx711_80hz"     # hx711_10hz | hx711_80hz | precision_balance
division_g = 0.1               # display step d
capacity_g = 1000              # per cell; above capacity + 9 d is an overload
"""

_LEVER: Final = """
# A classic swing-weight beam pivoting at 14 in, with a load cell under the lever arm,
# paired with a gram scale that weighs the whole club.
[[devices]]
name = "lever"
driver = "beam"
port = "/dev/heft-beam"

[[devices]]
name = "scale"
driver = "stream_balance"
port = "/dev/heft-scale"
baudrate = 9600

[geometry]
type = "lever_beam"
force_channel = "lever/0"
lever_arm_in = "5in"           # pivot to the cell's contact point
lever_arm_u_in = 0.01
weight_channel = "scale/0"
fulcrum_in = 14                # where the pivot sits, from the butt
pairing_window_s = 300         # a weighing and a beam reading further apart don't pair

[channels."lever/0"]
source = "config"              # numbers from a bench calibration sheet
zero_counts = 8000
counts_per_g = 420.0

[capture]
preset_name = "hx711_10hz"
[capture.per_channel."scale/0"]
division_g = 0.1
capacity_g = 2000
device_flags = "veto"          # the balance's own MOTION flag blocks a capture
"""

_SINGLE: Final = """
# One precision balance; the balance point is found on a knife edge and entered per club,
# by the set_balance_point command or a scanner tag such as "BP:29.25in".
[[devices]]
name = "scale"
driver = "poll_balance"
port = "/dev/heft-scale"
baudrate = 9600

[[devices]]
name = "scanner"
driver = "scanner"
port = "/dev/heft-scanner"

[geometry]
type = "single_scale"
weight_channel = "scale/0"
balance_point_u_in = 0.07      # standard uncertainty of an entered balance point (in)
balance_point_prefix = "BP:"

[capture]
preset_name = "precision_balance"
"""

_TAIL: Final = """
# A spec: target swing weight with a tolerance in points, optional ranges, per-club targets.
[specs.irons-d2]
swingweight = "D2"
tolerance_points = 0.5
near_limit_fraction = 0.2      # the outer fifth of each half-band warns "near limit"
total_weight = {{ min_g = "380g", max_g = "460g" }}
balance_point = {{ min_in = 25.0, max_in = 30.0 }}

[specs.irons-d2.clubs.pw]
swingweight = "D3"             # the wedge a point heavier

[specs.irons-d2.clubs.sw]
swingweight = "D4"
tolerance_points = 0.7

[jobs.larkspur-irons-2026]
spec = "irons-d2"
description = "Larkspur Clubworks, a set of irons 4i-SW for a customer fitting"

[mqtt]
enabled = {mqtt_enabled}
host = "127.0.0.1"
port = 1883
topic_root = "heft"
# username = "bench"
# password = "..."
# [mqtt.tls]
# ca_file = "/etc/heft/ca.pem"

# Who may change the station over MQTT (tare, zero, calibration, job/spec/club selection,
# acknowledge, re-arm): each such command is signed with an operator's key
# ('heft keys new OPERATOR --file PATH'). Without keys they are refused, unless
# open_bench = true says anyone who can reach the broker may command this bench.
[commands]
# keys_file = "/etc/heft/operator-keys"
open_bench = false
"""

_BODIES: Final = {"two_support": _TWO_SUPPORT, "lever_beam": _LEVER, "single_scale": _SINGLE}


def example_toml(geometry: str, *, mqtt_enabled: bool = True) -> str:
    """A commented, valid example config for ``geometry``."""
    try:
        body = _BODIES[geometry]
    except KeyError:
        raise ValueError(
            f"geometry must be one of {', '.join(_BODIES)}, not {geometry!r}"
        ) from None
    return (
        _HEAD.format(geometry=geometry)
        + body
        + _TAIL.format(mqtt_enabled="true" if mqtt_enabled else "false")
    )
