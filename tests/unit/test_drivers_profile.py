"""Device profiles: the format version, every error naming file, device and key, the shutter
and counter rules, the named codecs and the two-way templates."""

from __future__ import annotations

import copy
import struct
import tomllib
from pathlib import Path

import pytest

from aligner.errors import InputError
from aligner_drivers.dialogue import DialoguePort
from aligner_drivers.lineproto import (
    FORMAT,
    PROFILE_DIR,
    Bus,
    LineChannel,
    Template,
    codec,
    load_profile,
    loader,
    parse_profile,
    shipped_profiles,
)
from aligner_drivers.serial_mount import LineMount

MOUNT = tomllib.loads((PROFILE_DIR / "example-mount.toml").read_text())
SHUTTER = {
    "format": 1,
    "device": {"name": "beam-block"},
    "entry": {
        "shutter": {
            "write": "SH {state}",
            "states": {"1": "open", "0": "shut"},
        }
    },
}


def changed(base: dict, **tables: dict) -> dict:
    data = copy.deepcopy(base)
    for table, values in tables.items():
        if not isinstance(values, dict):
            data[table] = values
            continue
        target = data.setdefault(table, {})
        for key, value in values.items():
            if isinstance(value, dict) and isinstance(target.get(key), dict):
                target[key].update(value)
            else:
                target[key] = value
    return data


def test_shipped_profiles_load_by_name_and_path_and_say_their_roles():
    assert load_profile("example-mount").roles == {"mount"}
    counter = load_profile(PROFILE_DIR / "example-counter.toml")
    assert counter.roles == {"counter", "shutter"} and counter.counter.channels == 2
    assert len(shipped_profiles()) == 14


def test_format_is_required_and_a_newer_one_is_refused():
    old = {"link": {"terminator": "\r\n"}, "commands": {"query": "AT?"}, "replies": {}}
    with pytest.raises(InputError, match=r"p\.toml: device 'p': format: is required.*earlier"):
        parse_profile(old, "p.toml")
    with pytest.raises(InputError, match=rf"format: {FORMAT + 1} is newer than this aligner"):
        parse_profile(changed(MOUNT, format=FORMAT + 1), "p.toml")
    with pytest.raises(InputError, match="format: must be a whole number"):
        parse_profile(changed(MOUNT, format="1"), "p.toml")


@pytest.mark.parametrize(
    ("tables", "key", "allowed"),
    [
        ({"axis": {"speed": 3}}, "axis.speed", "allowed: home_deg, move_timeout_s"),
        ({"gearbox": {"ratio": 2}}, "gearbox", "allowed: axis, counter, device"),
        ({"link": {"retries": -1}}, "link.retries", ">= 0"),
        ({"link": {"retries": 1.5}}, "link.retries", "whole number"),
        ({"link": {"baud": "fast"}}, "link.baud", "whole number"),
        ({"link": {"encoding": "klingon"}}, "link.encoding", "unknown codec"),
        ({"link": {"reply_end": ""}}, "link.reply_end", "non-empty string"),
        ({"link": {"echo": "yes"}}, "link.echo", "true or false"),
        ({"link": {"error_reply": "ERR {code}"}}, "link.error_reply", "unknown field {code}"),
        ({"entry": {"position": {"write": "GO {angle}"}}}, "entry.position.write", "{angle}"),
        ({"entry": {"position": {"write": "GO"}}}, "entry.position.write", "contain {value}"),
        ({"entry": {"position": {"write": "GO {value"}}}, "entry.position.write", "bad template"),
        ({"entry": {"position": {"write": "GO {value:oct}"}}}, "entry.position.write", "codec"),
        ({"entry": {"position": {"write": "GO {value!r}"}}}, "entry.position.write", "conver"),
        ({"entry": {"position": {"reply": "AT {steps}"}}}, "entry.position.reply", "{steps}"),
        ({"entry": {"position": {"scale": 0}}}, "entry.position.scale", "must not be 0"),
        ({"entry": {"position": {"limits": [10, -10]}}}, "entry.position.limits", "low < high"),
        ({"entry": {"position": {"speed": 1}}}, "entry.position.speed", "allowed: default_state"),
        ({"entry": {"position": {"done": "soon"}}}, "entry.position.done", "'reply' or 'status'"),
        ({"entry": {"status": {"states": {"1": "busy"}}}}, "entry.status.states.1", "moving"),
        ({"entry": {"status": {"reply": "BUSY {value}"}}}, "entry.status.reply", "{state} or"),
        ({"entry": {"Jog": {"write": "J"}}}, "entry.Jog", "lower-case"),
        ({"entry": {"stop": {"write": "HALT {value}"}}}, "entry.stop.write", "takes no {value}"),
        ({"entry": {"home": {"read": "H?"}}}, "entry.home.reply", "needs the template"),
        ({"device": {"init": ["home"]}}, "device.init", "needs_home = true instead"),
        ({"device": {"init": ["servo"]}}, "device.init", "'servo' is not an entry"),
        ({"entry": {"start": {"read": "S?", "reply": "{value}"}}}, "entry.start.write", "required"),
        ({"counter": {"channels": 5}}, "counter.channels", "1 to 4"),
    ],
)
def test_errors_name_file_device_key_and_what_is_allowed(tables, key, allowed):
    with pytest.raises(InputError) as info:
        parse_profile(changed(MOUNT, **tables), "bench-rotator.toml")
    message = str(info.value)
    assert message.startswith(f"bench-rotator.toml: device 'example-mount': {key}:"), message
    assert allowed in message


def test_context_fields_need_their_setting_and_a_decimal_position_needs_a_tolerance():
    data = changed(MOUNT, entry={"position": {"read": "{addr}AT?"}})
    with pytest.raises(InputError, match=r"device\.address: is required: entry\.position\.read"):
        parse_profile(data, "p.toml")
    data = changed(MOUNT, entry={"position": {"write": "GO {value}", "reply": "AT {value}"}})
    del data["axis"]["tolerance_deg"]
    with pytest.raises(InputError, match=r"axis\.tolerance_deg: is required .*codec has no"):
        parse_profile(data, "p.toml")


def test_default_tolerance_is_one_and_a_half_device_steps():
    data = copy.deepcopy(MOUNT)
    del data["axis"]["tolerance_deg"]
    assert parse_profile(data).axis.tolerance_deg == pytest.approx(1.5 / 1000.0)


def test_a_motion_without_status_must_end_with_its_reply():
    data = copy.deepcopy(MOUNT)
    del data["entry"]["status"]
    del data["entry"]["position"]["write_reply"]
    with pytest.raises(InputError, match=r"entry\.position\.write_reply: is required: without"):
        parse_profile(data, "p.toml")


def test_shutter_whose_open_and_shut_send_the_same_command_needs_a_state_query():
    """Issue 9: identical open and shut commands toggle; a toggle needs a state query."""
    toggle = changed(SHUTTER)
    toggle["entry"]["shutter"]["write"] = "SH"
    with pytest.raises(InputError) as info:
        parse_profile(toggle, "s.toml")
    assert (
        "s.toml: device 'beam-block': entry.shutter.read: is required: open and shut send "
        "the same command 'SH', so it toggles" in str(info.value)
    )
    toggle["entry"]["shutter"].update(read="SH?", reply="{state}")
    assert parse_profile(toggle).entries["shutter"].write.fields == frozenset()
    assert parse_profile(SHUTTER).entries["shutter"].read is None


def test_shutter_codes_must_be_writable_and_name_both_states():
    data = changed(SHUTTER)
    data["entry"]["shutter"]["write"] = "SH {state:a1}"
    data["entry"]["shutter"]["states"] = {"1": "open", "00": "shut"}
    with pytest.raises(InputError, match=r"entry\.shutter\.states: the code for shut cannot be"):
        parse_profile(data, "s.toml")
    data["entry"]["shutter"]["states"] = {"1": "open"}
    with pytest.raises(InputError, match=r"entry\.shutter\.states: must give the code for open"):
        parse_profile(data, "s.toml")


def test_gated_counter_must_be_able_to_tell_when_its_gate_has_ended():
    data = {
        "format": 1,
        "counter": {"channels": 1},
        "entry": {
            "gate": {"write": "G {value:int}", "scale": 1000},
            "start": {"write": "GO"},
            "counts": {"read": "C?", "reply": "{value:int}"},
        },
    }
    with pytest.raises(InputError, match=r"entry\.counting: is required .*previous gate"):
        parse_profile(data, "c.toml")
    stream = {"format": 1, "entry": {"stream": {"reply": "{ch1}"}}}
    with pytest.raises(InputError, match=r"counter\.window_s: is required"):
        parse_profile(stream, "c.toml")
    both = copy.deepcopy(data)
    both["entry"]["stream"] = {"reply": "{ch1}"}
    with pytest.raises(InputError, match="one of count, gate, stream"):
        parse_profile(both, "c.toml")


def test_missing_and_broken_files_are_input_errors(tmp_path):
    with pytest.raises(InputError, match=r"no such profile file.*example-mount"):
        load_profile(tmp_path / "absent.toml")
    broken = tmp_path / "broken.toml"
    broken.write_text("[link\nbaud = 1")
    with pytest.raises(InputError, match=r"broken\.toml: not valid TOML"):
        load_profile(broken)


# -- codecs ---------------------------------------------------------------------------------


@pytest.mark.parametrize("value", [0, 1, -1, 18049, -12200, 2**31 - 1, -(2**31), 0x7FFF0000])
def test_hex8s_is_32_bit_twos_complement(value):
    """Checked against Python's struct module (big-endian signed 32-bit integer, two's
    complement; Python standard library documentation)."""
    text = codec("hex8s").encode(value)
    assert text == struct.pack(">i", value).hex().upper()
    assert codec("hex8s").decode(text) == value
    assert codec("hex8s").decode(text.lower()) == value


def test_codecs_refuse_what_does_not_fit():
    with pytest.raises(ValueError, match="does not fit 8 hex digits"):
        codec("hex8s").encode(2**31)
    with pytest.raises(ValueError, match="does not fit 2 hex digits"):
        codec("hex2").encode(-1)
    with pytest.raises(ValueError, match="not a whole number"):
        codec("int").encode(1.5)
    with pytest.raises(ValueError, match="not 2 characters"):
        codec("a2").encode("ABC")
    with pytest.raises(ValueError, match="unknown codec 'hex99'"):
        codec("hex99")
    assert codec("hex2").encode(255) == "FF" and codec("hex4").decode("8000") == 32768
    assert codec("f3").encode(45.12345) == "45.123" and codec("f3").step == pytest.approx(1e-3)
    assert codec("num").encode(45.12345) == "45.12345" and codec("num").decode("-3e2") == -300.0


# -- templates ------------------------------------------------------------------------------

REPLY_FIELDS = frozenset({"value", "state", "bits", "error", "message"})


def test_a_template_formats_and_parses_the_same_text():
    template = Template("{addr}MD{value:hex8s}", allowed=REPLY_FIELDS, replies=True)
    context = {"addr": "2"}
    text = template.render(context, {"value": -12200})
    assert text == "2MDFFFFD058"
    assert template.match(text, context) == {"value": -12200}
    assert template.match("1MDFFFFD058", context) is None  # another address: not ours
    assert template.match(" 2MDFFFFD058\r\n", context) == {"value": -12200}


def test_reply_templates_split_fixed_width_fields_and_ignore_underscored_ones():
    status = Template("{addr}TS{bits:hex4}{state:a2}", allowed=REPLY_FIELDS, replies=True)
    assert status.match("1TS001F28", {"addr": "1"}) == {"bits": 0x1F, "state": "28"}
    slash = Template("@{addr} OK {_s} {_f} {value:int}", allowed=REPLY_FIELDS, replies=True)
    assert slash.match("@01 OK IDLE -- -96000", {"addr": "01"}) == {"value": -96000}
    error = Template("{error:int}, {message:text}", allowed=REPLY_FIELDS, replies=True)
    assert error.match("26, INTERLOCK OPEN", {}) == {"error": 26, "message": "INTERLOCK OPEN"}
    braces = Template("f({{x}}) {value:int}", allowed=REPLY_FIELDS, replies=True)
    assert braces.render({}, {"value": 3}) == "f({x}) 3"


def test_template_errors():
    with pytest.raises(ValueError, match="appears twice"):
        Template("{value} {value}", allowed=REPLY_FIELDS, replies=True)
    with pytest.raises(ValueError, match="takes no codec"):
        Template("{addr:int}", allowed=REPLY_FIELDS, replies=True)
    with pytest.raises(ValueError, match=r"unknown field \{_x\}"):
        Template("{_x}", allowed=frozenset({"value"}), replies=False)


# -- the reference page ---------------------------------------------------------------------

DOCS = Path(__file__).resolve().parents[2] / "docs" / "device-profiles.md"


def test_the_reference_page_describes_every_key():
    text = DOCS.read_text(encoding="utf-8")
    keys = {k for keys in loader._TABLES.values() for k in keys} | set(loader._ENTRY_KEYS)
    missing = sorted(k for k in keys | {"format"} if f"`{k}`" not in text)
    assert missing == []
    for table in [*loader._TABLES, "entry.NAME", "error_codes"]:
        assert f"`[{table}]`" in text


def test_the_reference_pages_example_and_dialogue_work():
    text = DOCS.read_text(encoding="utf-8")
    example = text.split("```toml\n", 1)[1].split("```", 1)[0]
    profile = parse_profile(tomllib.loads(example), "example.toml")
    pairs = [("1MA10000", "1OK"), ("1BZ", "1BZ0"), ("1TP", "1TP10000")]
    assert str(pairs)[1:-1].replace("'", '"') in text  # the page shows this dialogue
    port = DialoguePort(profile, pairs)
    LineMount(LineChannel(Bus(port, profile.link), profile)).move_to(10.0)
    port.check_done()
