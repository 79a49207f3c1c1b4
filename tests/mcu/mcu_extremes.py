# Runs on the emulated board and on CPython (tests/mcu/test_small_ints.py): the Supervisor on
# a large legal profile, fed readings at the top of its legal ranges, so the MPPT power sum
# (10 mW x ticks) climbs to its largest values. Prints the ticks whose call changed the heap
# (gc disabled around each call: any long int made in the tick is a heap allocation), the
# largest power sum reached, and a sha256 of every tick's commands.
#   mcu_extremes.py PROFILE N
import gc
import hashlib
import sys
from array import array

sys.path.insert(0, ".")

FIELDS = ("batt_duty", "cap_duty", "dump_duty", "usb_conv", "usb_on", "usb_probe", "batt_out",
          "bal_mask", "stage", "usb_match", "fault")


def feed(m, k):
    m.bus_mv = 59000 - (k % 50) * 10  # just under a 60 V trip, on a 100 V sensor
    m.src_ma = 100000 - (k % 7)  # 100 A: the largest current full scale
    m.batt_mv = 13500 + (k % 11)
    m.batt_ma = 30000 - (k % 13)
    m.batt_temp_dc = 250
    m.cap_mv = 15000
    m.cap_ma = 20000
    m.usb_vbus_mv = 5000
    m.usb_dp_mv = 600
    m.usb_dm_mv = 600


def main(argv):
    from controller import profile
    p = profile.load(argv[1])
    n = int(argv[2])
    profile.forget_rules()
    from controller.supervisor import Supervisor
    sup = Supervisor(p)
    h = hashlib.sha256()
    row = array("i", [0] * len(FIELDS))
    changed = 0
    top = 0
    t = 0
    c = sup.c
    for k in range(n):
        feed(sup.m, k)
        gc.disable()
        a = gc.mem_alloc() if hasattr(gc, "mem_alloc") else 0
        sup.tick(t)
        b = gc.mem_alloc() if hasattr(gc, "mem_alloc") else 0
        gc.enable()
        if a != b:
            changed += 1
        acc = sup.mppt.acc_cw
        if acc > top:
            top = acc
        for i in range(len(FIELDS)):
            row[i] = getattr(c, FIELDS[i])
        h.update(row)
        t = (t + p.period_ms) & 0x3FFFFFFF
        if k % 200 == 0:
            gc.collect()
    print("EXT", changed, top, "".join("%02x" % x for x in h.digest()), n)


if __name__ == "__main__":
    main(sys.argv)
