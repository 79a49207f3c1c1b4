# Reading and validating a profile document (load-time code: controller.profile imports this
# only while a profile is loaded, and profile.forget_rules() drops it with the rules).
import json

from controller.compat import ConfigError
from controller.profile import Profile


def from_dict(doc):
    """Validate a parsed profile document and return a Profile. Raises ConfigError."""
    from controller import profile_fields as _f
    from controller import profile_system as _s
    from controller.profile_battery import battery
    if not isinstance(doc, dict):
        raise ConfigError("profile: expected a JSON object at the top level")
    for key in doc:
        if key not in _f.SECTIONS and key not in ("name", "notes"):
            raise ConfigError("%s: unknown section; allowed: name, notes, %s"
                              % (key, ", ".join(_f.SECTIONS)))
    p = Profile()
    name = doc.get("name", "")
    if not isinstance(name, str):
        raise ConfigError("name = %r: expected a string" % (name,))
    p.name = name
    battery(p, _f.section(doc, "battery"))
    _s.supercap(p, _f.section(doc, "supercap"))
    _s.usb(p, _f.section(doc, "usb"))
    _s.bus(p, _f.section(doc, "bus"))
    _s.sensors(p, _f.section(doc, "sensors"))
    _s.control(p, _f.section(doc, "control"))
    _s.cross_checks(p)
    return p


def load(path):
    """Read and validate a profile file. Raises ConfigError (also for unreadable JSON)."""
    try:
        with open(path) as f:
            doc = json.load(f)
    except OSError as e:
        raise ConfigError("%s: cannot read profile (%s)" % (path, e))
    except ValueError as e:
        raise ConfigError("%s: not valid JSON (%s)" % (path, e))
    try:
        return from_dict(doc)
    except ConfigError as e:
        raise ConfigError("%s: %s" % (path, e))
