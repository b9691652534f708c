"""The generic line protocol: device profiles, framing, the shared bus and the device channel.

Modules by concern:

- :mod:`.profile` and :mod:`.loader`: the device-profile model, and reading and checking
  profile files (format in docs/device-profiles.md);
- :mod:`.template` and :mod:`.codecs`: two-way message templates and the named codecs;
- :mod:`.framing`: bytes to messages (end markers, echo, prompt, fixed-length replies);
- :mod:`.bus`: one open port shared by the devices on it, reply attribution;
- :mod:`.channel`: one device on a bus, entry by entry, with retries and error checks.

Safety first: a mount that turns a polarizer or a shutter that opens can send light onto a
single-photon detector or out of the bench. Try a new profile with the beam blocked and the
detectors off, and follow your local laser-safety rules and your laser safety officer.
"""

from __future__ import annotations

from .bus import PORT_ERRORS, Bus
from .channel import LineChannel
from .codecs import Codec, codec
from .framing import Framer, Framing, SerialLike
from .loader import FORMAT, PROFILE_DIR, load_profile, parse_profile, shipped_profiles
from .profile import DeviceProfile, Entry
from .template import Template

__all__ = [
    "FORMAT",
    "PORT_ERRORS",
    "PROFILE_DIR",
    "Bus",
    "Codec",
    "DeviceProfile",
    "Entry",
    "Framer",
    "Framing",
    "LineChannel",
    "SerialLike",
    "Template",
    "codec",
    "load_profile",
    "parse_profile",
    "shipped_profiles",
]
