"""``aligner device``: bring up one device: what it says it is, and a short self-test.

``profiles`` lists the shipped example profiles; ``show`` opens a device from its spec (and
profile), prints what it identifies as and its state, moving nothing; ``try`` runs a short
self-test after a safety confirmation: a mount is homed if it needs it, moved a small step and
back, read back against its tolerance, with the round trips timed; a counter counts one short
gate; a shutter is shut, opened and shut again with its state read back; a pointer reader reads
once. ``--wire`` prints every byte sent and received, escaped, on stderr.

Exit status: 0 all well, 2 bad input (or the self-test not confirmed), 3 a device fault.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from typing import Any

from .common import add_json_flag, laser_safety

ROLES = ("mount", "counter", "shutter", "pointer")
SAFETY = laser_safety(
    "block the beam and switch single-photon detectors off (or shield them) before a self-test."
)
CAUTION = (
    "CAUTION: the self-test moves this device (a mount turns, a shutter opens). Laser safety: "
    "follow your local laser-safety rules and your laser safety officer; block the beam and "
    "switch single-photon detectors off or shield them."
)


def register(sub: argparse._SubParsersAction) -> None:
    """Create the ``device`` subcommand and its actions."""
    parser = sub.add_parser(
        "device",
        help="bring up one device: identify it, self-test it",
        description="Open one device from its spec and profile: what it identifies as, and a "
        "short self-test. This is how a new controller is brought up.",
        epilog=SAFETY,
    )
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    add_json_flag(actions.add_parser("profiles", help="the shipped example profiles"))
    show = actions.add_parser("show", help="open a device, print its identity and state")
    trial = actions.add_parser("try", help="a short self-test (asks first)", epilog=SAFETY)
    for p in (show, trial):
        p.add_argument(
            "spec", metavar="SPEC", help="port path, pyserial URL (socket://host:port) or sim"
        )
        p.add_argument("--profile", metavar="PROFILE", help="device profile (file or shipped name)")
        p.add_argument("--as", dest="role", choices=ROLES, help="which device the profile drives")
        p.add_argument("--addr", metavar="ADDR", help="device address on a shared line")
        p.add_argument("--axis", metavar="AXIS", help="axis of a multi-axis controller")
        p.add_argument("--timeout", metavar="S", type=float, help="reply timeout (s)")
        p.add_argument(
            "--wire", action="store_true", help="print every byte sent and received (stderr)"
        )
        add_json_flag(p)
    trial.add_argument(
        "--yes", action="store_true", help="skip the safety question (the bench is safe)"
    )
    trial.add_argument(
        "--step", metavar="DEG", type=float, default=1.0, help="mount step (deg, default 1)"
    )
    trial.add_argument(
        "--dwell", metavar="S", type=float, default=0.1, help="gate or reading time (s)"
    )
    parser.set_defaults(handler=run)


def escaped(data: bytes) -> str:
    """``data`` for a terminal: printable ASCII as is, everything else as an escape."""
    names = {0x0D: "\\r", 0x0A: "\\n", 0x09: "\\t", 0x5C: "\\\\"}
    return "".join(names.get(b, chr(b) if 0x20 <= b < 0x7F else f"\\x{b:02x}") for b in data)


def clean(text: str) -> str:
    """Device or file text for the terminal: control characters replaced."""
    return "".join(ch if ch.isprintable() else "?" for ch in text)


@dataclass(frozen=True)
class Step:
    """One step of the self-test: what, whether it went well, how long it took (s)."""

    name: str
    ok: bool
    seconds: float
    detail: str


@dataclass(frozen=True)
class Report:
    """What a device said about itself, and the self-test steps (none for ``show``)."""

    spec: str
    profile: str | None
    role: str
    identity: str
    capabilities: tuple[str, ...]
    state: dict[str, Any]
    steps: tuple[Step, ...] = ()
    notices: tuple[str, ...] = field(default=())

    @property
    def ok(self) -> bool:
        """True when every step went well."""
        return all(s.ok for s in self.steps)

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``--json``."""
        return {
            "spec": self.spec,
            "profile": self.profile,
            "role": self.role,
            "identity": self.identity,
            "capabilities": list(self.capabilities),
            "state": self.state,
            "steps": [asdict(s) for s in self.steps],
            "ok": self.ok,
            "notices": list(self.notices),
        }


def _role(args: argparse.Namespace) -> str:
    from ..errors import InputError

    if args.role:
        return str(args.role)
    if args.profile is None:
        raise InputError(f"--as: say which device {args.spec!r} is ({', '.join(ROLES)})")
    from aligner_drivers.open import profile_roles

    roles = sorted(profile_roles(args.profile))
    if len(roles) != 1:
        raise InputError(
            f"--as: {args.profile} drives {' and '.join(roles) or 'nothing'}; choose one of "
            f"{', '.join(roles)} with --as"
        )
    return roles[0]


def _open(args: argparse.Namespace, role: str) -> Any:
    from aligner_drivers.open import open_counter, open_mount, open_pointer, open_shutter

    openers = {
        "mount": open_mount,
        "counter": open_counter,
        "shutter": open_shutter,
        "pointer": open_pointer,
    }
    options: dict[str, Any] = {}
    if args.profile is not None:
        options = {k: v for k, v in (("addr", args.addr), ("axis", args.axis)) if v is not None}
        if args.timeout is not None:
            options["timeout"] = args.timeout
        if args.wire:
            start = time.monotonic()

            def wire(direction: str, data: bytes) -> None:
                stamp = (time.monotonic() - start) * 1e3
                print(f"wire {stamp:9.1f} ms {direction} {escaped(data)}", file=sys.stderr)

            options["wire_log"] = wire
    return openers[role](args.spec, profile=args.profile, **options)


def _state(device: Any, role: str) -> dict[str, Any]:
    if role == "mount":
        return {"position_deg": device.position(), "moving": device.is_moving()}
    if role == "shutter":
        known = "readback" in device.capabilities
        return {"open": device.is_open(), "read_back": known}
    if role == "counter":
        return {"channels": device.channels, "gate_step_s": getattr(device, "gate_step_s", None)}
    return {}


def _timed(name: str, action: Callable[[], str]) -> Step:
    from ..errors import DeviceError

    started = time.monotonic()
    try:
        detail = action()
    except DeviceError as exc:
        return Step(name, False, time.monotonic() - started, clean(str(exc)))
    return Step(name, True, time.monotonic() - started, detail)


def _mount_steps(mount: Any, step_deg: float) -> list[Step]:
    steps: list[Step] = []
    if "needs_home" in mount.capabilities:

        def home() -> str:
            mount.home()
            return f"at {mount.position():.6g} deg"

        steps.append(_timed("home", home))
        if not steps[-1].ok:
            return steps
    start = mount.position()
    profile = getattr(mount, "profile", None)
    tolerance = profile.axis.tolerance_deg if profile is not None else 0.0
    limits = profile.entries["position"].limits if profile is not None else None
    target = start + step_deg
    if limits is not None and not limits[0] <= target <= limits[1]:
        target = start - step_deg
    for name, goal in (("step", target), ("back", start)):

        def move(goal: float = goal) -> str:
            mount.move_to(goal)
            reached = mount.position()
            return (
                f"to {goal:.6g} deg, reads {reached:.6g} deg ({reached - goal:+.2g}; "
                f"tolerance {tolerance:g} deg)"
            )

        steps.append(_timed(name, move))
        if not steps[-1].ok:
            return steps
    times = []
    for _ in range(5):
        t0 = time.monotonic()
        mount.position()
        times.append(time.monotonic() - t0)
    times.sort()
    steps.append(Step("query", True, times[2], "median of 5 position queries"))
    return steps


def _shutter_steps(shutter: Any) -> list[Step]:
    confirmed = "readback" in shutter.capabilities
    steps = []
    for name, action in (("shut", shutter.shut), ("open", shutter.open), ("shut", shutter.shut)):

        def act(action: Callable[[], None] = action) -> str:
            action()
            state = "open" if shutter.is_open() else "shut"
            return f"reads {state}" if confirmed else f"sent ({state} not confirmable)"

        steps.append(_timed(name, act))
        if not steps[-1].ok:
            break
    if not steps[-1].ok:  # whatever failed, try to leave it shut

        def shut() -> str:
            shutter.shut()
            return "shut after the failure"

        steps.append(_timed("shut", shut))
    return steps


def _self_test(device: Any, role: str, args: argparse.Namespace) -> list[Step]:
    if role == "mount":
        return _mount_steps(device, args.step)
    if role == "shutter":
        return _shutter_steps(device)
    if role == "counter":

        def gate() -> str:
            counts = device.count(args.dwell)
            windows = getattr(device, "last_windows", 0)
            extra = f" ({windows} windows)" if windows else ""
            return f"{args.dwell:g} s gate: counts {list(counts)}{extra}"

        return [_timed("gate", gate)]

    def reading() -> str:
        mean, sem = device.read(args.dwell)
        return f"{args.dwell:g} s reading: {mean:.6g} +- {sem:.2g}"

    return [_timed("read", reading)]


def _confirm(args: argparse.Namespace) -> None:
    from ..errors import InputError

    print(CAUTION, file=sys.stderr)
    if args.yes:
        return
    print("Is the bench safe for the self-test? [y/N] ", end="", file=sys.stderr, flush=True)
    try:
        answer = input()
    except EOFError:
        answer = ""
    if answer.strip().lower() not in ("y", "yes"):
        raise InputError("the self-test was not confirmed; answer yes, or pass --yes once safe")


def _print(report: Report) -> None:
    profile = f" with {clean(report.profile)}" if report.profile else ""
    print(f"{clean(report.spec)}{profile}: a {report.role}")
    print(f"  identity:     {clean(report.identity) or '(the device has no identity query)'}")
    print(f"  capabilities: {', '.join(report.capabilities) or '(none)'}")
    for key, value in report.state.items():
        print(f"  {key}: {value}")
    for s in report.steps:
        mark = "ok  " if s.ok else "FAIL"
        print(f"  {mark} {s.name:<6} {s.seconds * 1e3:8.1f} ms  {clean(s.detail)}")
    for notice in report.notices:
        print(f"  notice: {clean(notice)}")


def _profiles(args: argparse.Namespace) -> int:
    from aligner_drivers.open import shipped_profile_list

    from .common import emit_json

    rows = [
        {"name": name, "roles": sorted(roles), "description": description}
        for name, roles, description in shipped_profile_list()
    ]
    if args.json:
        emit_json({"profiles": rows})
    else:
        for row in rows:
            roles = "+".join(row["roles"])
            print(f"{row['name']:<26} {roles:<16} {clean(str(row['description']))}")
    return 0


def run(args: argparse.Namespace) -> int:
    """Carry out one ``device`` action."""
    from .common import emit_json

    if args.action == "profiles":
        return _profiles(args)
    role = _role(args)
    if args.action == "try":
        _confirm(args)
    device = _open(args, role)
    try:
        identity = device.identify() if hasattr(device, "identify") else ""
        state = _state(device, role)
        steps = _self_test(device, role, args) if args.action == "try" else []
        notices = device.take_notices() if hasattr(device, "take_notices") else []
    finally:
        device.close()
    report = Report(
        spec=args.spec,
        profile=args.profile,
        role=role,
        identity=identity,
        capabilities=tuple(sorted(getattr(device, "capabilities", ()))),
        state=state,
        steps=tuple(steps),
        notices=tuple(notices),
    )
    if args.json:
        emit_json(report.to_json())
    else:
        _print(report)
    return 0 if report.ok else 3
