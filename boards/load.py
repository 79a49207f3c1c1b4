# Phase 1 of the firmware entry (runs on the board): the slot's settings. Reads hw.json and
# manifest.json, loads and validates profile.json, then drops the validation code. main.py
# drops this module too once it has the results, so none of this code stays in RAM while the
# control loop runs.


def _read_json(path):
    import json
    with open(path) as f:
        return json.load(f)


def _hash8(text):
    import binascii
    try:
        return binascii.unhexlify(text[:16])
    except (ValueError, TypeError):
        return bytes(8)


def settings(slot):
    """(hw table, fw hash, profile hash, Profile) of the slot folder written by `spinrail
    flash`. Raises ConfigError (naming the file and field) for a bad profile."""
    from controller import profile
    hw = _read_json(slot + "/hw.json")
    try:
        man = _read_json(slot + "/manifest.json")
    except OSError:
        man = {}
    fw_h = _hash8(man.get("fw_sha256", ""))
    prof_h = _hash8(man.get("profile_sha256", ""))
    man = None  # the file list and its hashes: not needed past this line
    p = profile.load(slot + "/profile.json")
    profile.forget_rules()
    return hw, fw_h, prof_h, p
