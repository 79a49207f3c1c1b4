# Small helpers shared by the host commands: finding the MicroPython port, loading profiles
# with host-side error wrapping, and the safety caution shown by commands that set limits.
import shutil
import sys
from pathlib import Path

from controller import profile as _profile
from controller.compat import ConfigError
from host_sim.errors import UserError

ROOT = Path(__file__).resolve().parents[1]

CAUTION = (
    "CAUTION: lead-acid batteries give off hydrogen when overcharged (ventilate, no sparks or "
    "flames); batteries and supercaps deliver large short-circuit currents (fuse them, insulate "
    "tools); dump resistors get hot; gears and cranks pinch. These settings are starting points: "
    "follow the battery and supercap makers' data, local codes and licensed practice."
)


def caution():
    print(CAUTION, file=sys.stderr)


def find_micropython():
    for cand in (Path(sys.executable).parent / "micropython", ROOT / ".venv" / "bin" / "micropython"):
        if cand.exists():
            return str(cand)
    return shutil.which("micropython")


def profile_path(arg):
    """The profile file named on the command line, or the shipped default."""
    if arg is None:
        return _profile.default_path()
    p = Path(arg)
    if not p.exists():
        builtin = ROOT / "host_sim" / "profiles" / (arg + ".json")
        if builtin.exists():
            return str(builtin)
        if arg == "default":
            return _profile.default_path()
        raise UserError("%s: no such profile file (nor a built-in profile of that name)" % arg)
    return str(p)


def read_profile(path):
    """(document, Profile) of a profile file, read with the strict JSON loader (duplicate
    keys, deep nesting, huge integers refused). Raises ConfigError naming the file."""
    from host_sim.fileio import JsonError, load_json
    try:
        doc = load_json(path)
    except OSError as e:
        raise ConfigError("%s: cannot read profile (%s)" % (path, e.strerror or e))
    except JsonError as e:
        raise ConfigError(str(e))
    try:
        return doc, _profile.from_dict(doc)
    except ConfigError as e:
        raise ConfigError("%s: %s" % (path, name_derived(doc, str(e))))


def name_derived(doc, msg):
    """A range error on a field the profile does not hold can only be a default worked out
    from other fields (charge_limit_a is 0.2 C of capacity_ah): say so. (Host side: the
    board's validation code stays as small as it is.)"""
    field = msg.split(" = ", 1)[0]
    if " = " not in msg or " " in field or not isinstance(doc, dict):
        return msg
    node = doc
    for part in field.split("."):
        if not isinstance(node, dict) or part not in node:
            return msg + " (not written in the profile: derived from the other fields; write it)"
        node = node[part]
    return msg


def load_profile(arg):
    path = profile_path(arg)
    try:
        return read_profile(path)[1], path
    except ConfigError as e:
        raise UserError(str(e))
