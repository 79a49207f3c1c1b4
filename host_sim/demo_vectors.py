# Writes host_sim/data/demo_vectors.csv: an invented 200-second open-loop sequence at a pedal
# charging point (a rider spinning up, the battery nearing absorption and tapering, a phone
# plugged in, a sprint that overvolts the bus, a thermistor that drops out for a moment).
# Demo data only: the measurements do not respond to the commands (that is what `simulate`
# is for); they exercise the controller's branches for `spinrail vectors run`.
import math
import random
import sys

from host_sim.fileio import atomic_open

PERIOD_MS = 50
N_TICKS = 4000


def rows(seed=7):
    rnd = random.Random(seed)
    batt_mv = 14150.0
    for k in range(N_TICKS):
        t_ms = k * PERIOD_MS
        t_s = t_ms / 1000.0
        cadence = min(1.0, t_s / 10.0) * (1.0 + 0.1 * math.sin(t_s / 3.0))
        bus_mv = 19500.0 * cadence + rnd.gauss(0, 60)
        if 120.0 <= t_s < 123.0:
            bus_mv = 25500.0 + rnd.gauss(0, 100)  # a sprint on a light load: overvoltage
        charge_ma = 2300.0 * math.exp(-max(0.0, t_s - 20.0) / 25.0) if bus_mv > 14500 else 0.0
        batt_mv = min(14390.0, batt_mv + 0.004 * charge_ma * PERIOD_MS / 1000.0)
        temp_dc = 300 + int(t_s / 100)
        if 160.0 <= t_s < 161.0:
            temp_dc = -600  # thermistor lead loose for a second
        cap_mv = min(14580.0, 6000.0 + 70.0 * t_s)
        conv = bus_mv > 7000
        vbus_mv = 5020.0 + rnd.gauss(0, 8) if conv else 0.0
        # a dedicated charging port: D+ shorted to D-; the board's probe puts ~0.6 V on both
        line_mv = 600.0 if conv else 0.0
        yield (t_ms, int(bus_mv), int(batt_mv + rnd.gauss(0, 4)), int(charge_ma + rnd.gauss(0, 15)),
               temp_dc, int(cap_mv), int(vbus_mv), int(line_mv + rnd.gauss(0, 3)),
               int(line_mv + rnd.gauss(0, 3)))


def main(path=None):
    path = path or "host_sim/data/demo_vectors.csv"
    with atomic_open(path) as f:
        f.write("t_ms,bus_mv,batt_mv,batt_ma,batt_temp_dc,cap_mv,usb_vbus_mv,usb_dp_mv,usb_dm_mv\n")
        for r in rows():
            f.write(",".join(str(x) for x in r) + "\n")


if __name__ == "__main__":
    main(*sys.argv[1:])
