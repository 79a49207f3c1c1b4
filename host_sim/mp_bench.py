# Runs inside the MicroPython unix port (and CPython) for `spinrail bench`:
#   mp_bench.py alloc N     -> bytes allocated over N steady-state ticks (gc disabled)
#   mp_bench.py ticks N     -> runs N ticks (for callgrind: instructions of N ticks ...)
#   mp_bench.py loop N      -> ... minus the same loop with the tick call left out
#   mp_bench.py us N        -> board time (us) of N ticks and of the same loop without them, in
#                              one boot (an emulated board under qemu -icount shift=0 counts
#                              one guest instruction per ns: instructions = us x 1000)
# The readings are generated with integer arithmetic so the loop itself allocates nothing.
import gc
import sys

sys.path.insert(0, ".")


def make(path):
    from controller import profile
    p = profile.load(path)
    profile.forget_rules()
    gc.collect()
    from controller.supervisor import Supervisor
    return Supervisor(p)


def feed(m, k):
    """Readings for tick k: a drive that speeds up and slows down, a battery nearing
    absorption, a supercap filling, a USB port with a dedicated-port short, an occasional
    overvoltage spike and a thermistor glitch (so the guards' branches run too)."""
    ph = k % 400
    m.bus_mv = 12000 + ph * 30 if ph < 200 else 24000 - ph * 30
    if k % 997 < 3:
        m.bus_mv = 25000
    m.src_ma = 1500 + (k % 37) * 10
    m.batt_mv = 13800 + (k % 113) * 6
    m.batt_ma = 1200 - (k % 113) * 9
    m.batt_temp_dc = -600 if k % 1499 == 7 else 280
    m.cap_mv = 9000 + (k % 600) * 10
    m.cap_ma = 900
    m.usb_vbus_mv = 5010 + (k % 7)
    m.usb_dp_mv = 600
    m.usb_dm_mv = 598


def run(sup, n, call_tick, t0):
    m = sup.m
    t = t0
    for k in range(n):
        feed(m, k)
        if call_tick:
            sup.tick(t)
        t = (t + 50) & 0x3FFFFFFF
    return t


def main(argv):
    mode = argv[1]
    n = int(argv[2])
    prof = argv[3] if len(argv) > 3 else "controller/default_profile.json"
    sup = make(prof)
    t = run(sup, 500, 1, 0x3FFFFFFF - 5000)  # warm up, crossing the clock wrap
    if mode == "alloc":
        gc.collect()
        gc.disable()
        a = gc.mem_alloc()
        run(sup, 0, 1, t)
        b = gc.mem_alloc()
        run(sup, n, 1, t)
        c = gc.mem_alloc()
        gc.enable()
        print("alloc", (c - b) - (b - a), n)
    elif mode == "ticks":
        run(sup, n, 1, t)
        print(mode, sup.ticks)
    elif mode == "loop":
        run(sup, n, 0, t)
        print(mode, n)
    elif mode == "us":
        import time
        t1 = time.ticks_us()
        run(sup, n, 1, t)
        t2 = time.ticks_us()
        run(sup, n, 0, t)
        t3 = time.ticks_us()
        print("us", time.ticks_diff(t2, t1), time.ticks_diff(t3, t2), n)


if __name__ == "__main__":
    main(sys.argv)
