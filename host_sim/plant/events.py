# Timed events of a scenario: faults switched in and out, requests, weather changes.
# apply() is called by the plant at the start of the first control period at or after t_s.


def apply(plant, e, t_s):
    k = e["kind"]
    if k == "battery_disconnected":
        plant.batt.connected = False
    elif k == "battery_reconnected":
        plant.batt.connected = True
    elif k == "temp_sensor_open":
        plant.sensors.temp.open = True
    elif k == "temp_sensor_ok":
        plant.sensors.temp.open = False
        plant.sensors.temp.stuck = None
    elif k == "sensor_stuck":
        if e["sensor"] == "batt_temp":
            plant.sensors.temp.stuck = e["value"]
        else:
            for ch in plant.sensors.channel(e["sensor"]):
                ch.stuck = e["value"]
    elif k == "sensor_open":
        if e["sensor"] == "batt_temp":
            plant.sensors.temp.open = True
        else:
            for ch in plant.sensors.channel(e["sensor"]):
                ch.open = e["reads"]
    elif k == "sensor_ok":
        if e["sensor"] == "batt_temp":
            plant.sensors.temp.open = False
            plant.sensors.temp.stuck = None
        else:
            for ch in plant.sensors.channel(e["sensor"]):
                ch.open = None
                ch.stuck = None
    elif k == "wrong_divider_resistor":
        r = e["resistor"]
        if r.startswith(("dp_", "dm_")) or r == "between":
            plant.net.set_resistor(r, e["ohm"])
        else:
            ch, which = plant.sensors.divider(r)
            ch.set_resistor(which, e["ohm"])
    elif k == "bus_surge":
        plant.surges.append((t_s, t_s + e["duration_s"], e["surge_v"], e["surge_ohm"],
                             e["energy_j"]))
    elif k == "drive_stop":
        plant.drive.stopped = True
    elif k == "drive_start":
        plant.drive.stopped = False
    elif k == "equalize_request":
        plant.eq_until = t_s + e["duration_s"]
    elif k == "reset_request":
        plant.reset_until = t_s + e["duration_s"]
    elif k == "ambient":
        plant.batt.ambient_c = e["value"]
    elif k == "wind_mean":
        if hasattr(plant.drive, "mean"):
            plant.drive.mean = e["value"]
    else:  # the scenario schema lists every kind; reaching here is a programming error
        raise ValueError("event kind %r not handled" % k)
