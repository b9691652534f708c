"""The four device contracts the engine uses; nothing above ``drivers/`` sees a port.

Units and conventions, once for all drivers:

- angles are *readings* in degrees on the mount's own scale (what its dial or encoder says);
  the engine, not the driver, maps readings to optical axes;
- dwell (gate) times are in seconds; counts are whole numbers of events in that gate;
- counter channel 1 is the post-selected port, channel 2 (when present) the reference port;
- pointer readings are in the bench's pointer units (whatever the bench file declares).

Every method either does what it says or raises an ``aligner.errors.DeviceError`` subclass
(or ``InputError`` for an argument out of range); none raises a pyserial or OS error.
The classes are ``runtime_checkable``, so ``isinstance(dev, RotationMount)`` checks the shape.

Optional parts a driver may add (the engine asks for them with ``isinstance``/``capabilities``):

- :class:`Identifies`: ``identify()`` returns the identity string the device reports (model,
  serial number, firmware), recorded with every run; "" when the device has no such query;
- mount capability ``needs_home``: the axis must be homed after power-up before it accepts
  moves; the engine homes it, with the shutter shut, when the device is opened;
- shutter capability ``readback``: ``is_open()`` asks the device for its state rather than
  repeating the last command, so the engine can confirm that the shutter is shut.

The *kind* of a device (real, simulated or typed in by the operator) is not the driver's to
say: the engine takes it from the spec the device was opened from.
"""

from __future__ import annotations

from typing import Protocol, runtime_checkable

__all__ = [
    "MOUNT_CAPABILITIES",
    "SHUTTER_CAPABILITIES",
    "Counter",
    "Identifies",
    "PointerReader",
    "RotationMount",
    "Shutter",
]

#: Optional mount features a driver may declare in ``RotationMount.capabilities``.
MOUNT_CAPABILITIES = frozenset({"home", "stop", "readback", "status", "needs_home"})
#: Optional shutter features a driver may declare in ``Shutter.capabilities``.
SHUTTER_CAPABILITIES = frozenset({"readback"})


@runtime_checkable
class Identifies(Protocol):
    """A device that can say what it is."""

    def identify(self) -> str:
        """The identity string the device reports (model, serial number, firmware), or ""."""
        ...


@runtime_checkable
class RotationMount(Protocol):
    """A motorized rotation mount holding one polarization element."""

    name: str
    #: subset of ``MOUNT_CAPABILITIES`` (``home`` and ``stop`` work only when listed).
    capabilities: frozenset[str]

    def move_to(self, reading_deg: float) -> None:
        """Move to ``reading_deg`` (deg) and return when the move is finished, or raise."""
        ...

    def position(self) -> float:
        """Read back the current reading (deg)."""
        ...

    def home(self) -> None:
        """Drive to the reference (home) position and return when there."""
        ...

    def stop(self) -> None:
        """Stop any move at once; safe to call from another thread."""
        ...

    def is_moving(self) -> bool:
        """True while a move is under way."""
        ...

    def close(self) -> None:
        """Release the device; later calls raise ``Disconnected``."""
        ...


@runtime_checkable
class Counter(Protocol):
    """A photon counter with one gate for all its channels."""

    #: 1 (post-selected only) or 2 (post-selected, reference).
    channels: int

    def count(self, dwell_s: float) -> tuple[int, ...]:
        """Count for ``dwell_s`` seconds; one whole count per channel, channel 1 first."""
        ...

    def close(self) -> None:
        """Release the device."""
        ...


@runtime_checkable
class Shutter(Protocol):
    """A beam shutter (or a detector gate used as one)."""

    #: subset of ``SHUTTER_CAPABILITIES``.
    capabilities: frozenset[str]

    def open(self) -> None:
        """Open the beam path; return when open."""
        ...

    def shut(self) -> None:
        """Block the beam path; return when shut."""
        ...

    def is_open(self) -> bool:
        """True when the beam path is open, or may be: a shutter that cannot read back its
        state answers from the last acknowledged command and says True when that is unsure."""
        ...

    def close(self) -> None:
        """Release the device (does not move the shutter)."""
        ...


@runtime_checkable
class PointerReader(Protocol):
    """Reads the meter (pointer) of a weak measurement, e.g. a beam-centroid monitor."""

    def read(self, dwell_s: float) -> tuple[float, float]:
        """Average for ``dwell_s`` s; return (mean reading, its standard error), pointer units."""
        ...

    def close(self) -> None:
        """Release the device."""
        ...
