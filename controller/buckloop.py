# Output regulator shared by the battery and supercap buck converters.
# The loop integrates a commanded converter output voltage (u_mv) and turns it into a duty
# with input-voltage feedforward (duty = u / bus), so a bus that jumps with a gust or a
# sprint does not jump the charge current. Each tick u moves by the most restrictive of three
# errors: voltage under its ceiling, current under its limit, bus above its floor.
from array import array

from controller.compat import MICROPYTHON, const, micropython

if not MICROPYTHON:  # on a board the viper compiler reads ptr32() itself
    from controller.compat import ptr32, state_names

_DUTY_MAX = const(10000)  # signals.DUTY_MAX, repeated: a const is a machine int in viper
_DUTY_TOP = const(9500)  # a buck cannot run at 100 %: keep the switch's off-time
_KV_SHIFT = const(1)  # u step = voltage error / 2
_KI_DIV = const(16)  # u step = current error / 16 (mA -> mV; ~0.15 ohm output path) ...
_KI_OVER_DIV = const(4)  # ... and / 4 above the limit: an overcurrent is cut within a period
_KB_DIV = const(32)  # u step = bus error / 32 (a loaded generator sags several mV per mV)
_STEP_UP_MV = const(60)  # slowest to rise: soft start, and a tiring rider is not stalled
_STEP_DN_MV = const(2000)  # quick to fall
_CUT_MV = const(500)  # an overcurrent drops u this far below the output
_HEAD_MV = const(300)  # top duty x bus below output + this: no headroom, converter off
_SETTLE_MV = const(300)  # a stopped converter starts only on a bus that moved no more than this
_UNDER_MV = const(300)  # u never winds further below the output than this


# state slots of BuckLoop.st (array('i')); the host names them (state_names at the end)
_U = const(0)  # u_mv: commanded converter output voltage, mV; 0 when idle
_DUTY = const(1)  # duty: last duty, 0.._DUTY_MAX (below 0 only tapering over a store below 0 V)
_BUS_LAST = const(2)  # bus_last_mv: bus at the previous update, mV (may be negative)
_S_HALF = const(0x20000000)  # sign restore of a ptr32 load (compat.py, viper state)
_S_MASK = const(0x3FFFFFFF)


class BuckLoop:
    def __init__(self):
        self.st = array("i", [0, 0, 0])  # u_mv, duty, bus_last_mv (slots above)

    @micropython.viper
    def stop(self):
        s = ptr32(self.st)
        s[_U] = 0
        s[_DUTY] = 0
        s[_BUS_LAST] = 0

    def update(self, out_mv, ceil_mv, out_ma, lim_ma, bus_mv, floor_mv, u_cap_mv, coast=0):
        """One regulation step; returns the new duty (regulate() on this loop's state; the
        chargers call regulate() themselves, one call fewer)."""
        return regulate(self.st, out_mv, ceil_mv, out_ma, lim_ma, bus_mv, floor_mv, u_cap_mv,
                        coast)


@micropython.viper
def regulate(st, out_mv: int, ceil_mv: int, out_ma: int, lim_ma: int, bus_mv: int,
             floor_mv: int, u_cap_mv: int, coast: int) -> int:
    """One regulation step of the loop whose state is st (BuckLoop.st); returns the new duty.
    u_cap_mv caps u (for a current-limited path without a current sensor); pass a large value
    for none. coast: 1 lets a running converter that runs out of headroom hold the top duty
    while it still carries current (the supercap's: a store whose current limit is not a
    safety limit), 0 stops it."""
    ls = ptr32(st)
    last = ((ls[_BUS_LAST] + _S_HALF) & _S_MASK) - _S_HALF  # signed slot
    top_mv = (bus_mv * _DUTY_TOP) // _DUTY_MAX  # the most this bus can make at top duty
    if (coast and ls[_U] and 0 < top_mv and out_mv <= top_mv < out_mv + _HEAD_MV
            and out_ma <= lim_ma
            and out_ma > ((lim_ma >> 3) if out_mv < ceil_mv else (lim_ma >> 5))):
        # Coast: the current falls with the bus instead of stepping to nothing. A converter
        # that dropped a few amps at once let a soft source's bus jump 5 V within a period
        # and pushed the battery's converter, set for the lower bus, 10 % over its limit
        # for two periods. It stops once the bus cannot make the store's voltage.
        u = top_mv
        d = _DUTY_TOP
        if out_mv >= ceil_mv:
            # At or over its aim: taper, halving the drive over the output each period
            # (holding the top duty ran a bank into its clamp at 0.55 A, and the clamp's
            # stop was the step; stopping at the aim dropped 0.5 A at once and lifted a
            # crank's bus 5 V in a period, its battery to 15 % over the limit).
            u = (((ls[_U] + _S_HALF) & _S_MASK) - _S_HALF + out_mv) >> 1  # signed slot
            if u > top_mv:
                u = top_mv
            d = (u * _DUTY_MAX) // bus_mv  # bus_mv > 0: top_mv > 0
        ls[_U] = u
        ls[_DUTY] = d
        ls[_BUS_LAST] = bus_mv
        return d
    over_ma = out_ma - lim_ma
    if (top_mv <= 0 or top_mv < out_mv + _HEAD_MV or over_ma > lim_ma >> 1
            or (over_ma > lim_ma >> 5 and last and bus_mv - last > bus_mv >> 5)):
        # Off: a bus reading at or below 0 V has nothing to convert; with no headroom at the
        # top duty a buck cannot deliver, and a duty parked high would turn a bus that comes
        # back (a surge, a store unplugged from it) into a spike; half again over the limit
        # is not a loop error but a source or store that moved; and over the limit on a bus
        # that rose more than 3 % in a period, the bus is running away (a surge behind 3 ohm
        # took one 13.3 -> 14.1 -> 18.6 -> 26.5 V, faster than a cut could follow: the
        # battery went 2.84 A against 2.64 A for a second period). Start again only once the
        # bus has settled. (stop(), written out.)
        ls[_U] = 0
        ls[_DUTY] = 0
        ls[_BUS_LAST] = bus_mv
        return 0
    u = ((ls[_U] + _S_HALF) & _S_MASK) - _S_HALF  # signed slot (a coast on a bus below 0 V)
    if u == 0:
        # start at the zero-current point, and only on a bus that held still over the last
        # period where there is one to compare (a surge lifting a bus that had no headroom)
        ls[_BUS_LAST] = bus_mv
        if last and (bus_mv - last > _SETTLE_MV or last - bus_mv > _SETTLE_MV):
            return 0
        u = out_mv
    else:
        # u no further above what last period's duty makes from this bus than the current
        # headroom allows (taken over an 0.125 ohm path): on a falling bus the converter
        # delivered less than u, the current loop wound u up to make up for it, and a bus
        # that stops falling would hand the store all of it at once (a crank's bus settling
        # took the battery 11 % over its limit for two periods)
        made = ((((ls[_DUTY] + _S_HALF) & _S_MASK) - _S_HALF)  # signed slot: a bus
                * bus_mv) // _DUTY_MAX  # below 0 V makes a negative duty
        if out_ma < lim_ma:
            made += (lim_ma - out_ma) >> 3
        if u > made:
            u = made
    step = (ceil_mv - out_mv) >> _KV_SHIFT
    s = lim_ma - (lim_ma >> 5) - out_ma  # aim 3 % under the limit: room for noise
    s = s // _KI_DIV if s >= 0 else s // _KI_OVER_DIV
    if s < step:
        step = s
    s = (bus_mv - floor_mv) // _KB_DIV
    if s < step:
        step = s
    if step > _STEP_UP_MV:
        step = _STEP_UP_MV
    elif step < -_STEP_DN_MV:
        step = -_STEP_DN_MV
    if out_mv >= ceil_mv and step > 0:
        step = 0  # at or above the ceiling the output never rises
    cut = over_ma > lim_ma >> 5  # more than lim / 32 (3.1 %) over the limit
    if cut:
        u = out_mv - _CUT_MV  # 3 % over the limit: below the zero-current point at once (a
        # store reconnected under a high u, a bus that jumped within the period); ramp again
    else:
        u += step
    if u > u_cap_mv:
        u = u_cap_mv
    if u < out_mv - _UNDER_MV and out_ma <= lim_ma:
        u = out_mv - _UNDER_MV  # (over the current limit u may fall further: a wrong
        # bus reading or a stiff source must not hold the current up)
    if u < 1:
        u = 1
    # duty holds for the coming period: if the bus is rising, divide by where it may go
    # (twice the last period's rise ahead), so a bus freed of a load does not surge the
    # output. Twice: a soft source that lost a load rises faster each period (a crank went
    # 14.1 -> 15.2 -> 17.7 -> 23.4 V) and one rise ahead put its battery 48 % over the
    # limit; on a rise that slows, the output only falls short for a period.
    # (bus_mv > 0 here, so ff > 0: the off test above returned on a bus at or below 0 V.)
    ff = bus_mv
    room = 0
    if last and bus_mv > last:
        ff = bus_mv + ((bus_mv - last) << 1)
        # ... but only the part of that rise the current has no room for: a store under its
        # limit takes a rising bus (output up to its room over 0.125 ohm at the bus ahead, never
        # above what u makes from this bus). Dividing all of it out made the current fall as
        # a soft source rose, so the bus rose faster: a wind machine's bus ran 15.9 -> 20.2 V
        # in seven periods with its battery at 11.5 -> 8.4 A of 12 A, into the soft zone.
        if not cut and out_ma < lim_ma - (lim_ma >> 5) and out_mv < ceil_mv - (ceil_mv >> 7):
            room = (lim_ma - (lim_ma >> 5) - out_ma) >> 3  # mV, at most lim / 8 (lim < 2**20)
    if cut and ff < bus_mv + (bus_mv >> 3):
        ff = bus_mv + (bus_mv >> 3)  # after a cut, no current even if the bus rises 12 %
    ls[_BUS_LAST] = bus_mv
    d = (u * _DUTY_MAX) // ff
    if room:
        d = ((u + room) * _DUTY_MAX) // ff  # u + room < 2**17 mV: the product stays < 2**30
        d_now = (u * _DUTY_MAX) // bus_mv
        if d > d_now:
            d = d_now
    if d > _DUTY_TOP:
        d = _DUTY_TOP
        # anti-windup: u no higher than this bus can make, so a bus that jumps later
        # restarts from the output instead of from a wound-up u
        u = top_mv
    ls[_U] = u
    last_d = ((ls[_DUTY] + _S_HALF) & _S_MASK) - _S_HALF  # signed slot
    if d > last_d and (out_mv >= ceil_mv
                       or (out_mv >= ceil_mv - (ceil_mv >> 7) and last and bus_mv > last)):
        # the feedforward must not raise it either (a falling bus); nor, within 1/128 of the
        # ceiling, may a rising bus (a 3-cell block 3 mV over its ceiling plus margin when
        # its duty rose on a bus going up)
        d = last_d
    if cut and d > last_d - (last_d >> 2):
        d = last_d - (last_d >> 2)  # and a cut lowers the duty by a quarter at least,
        # whatever the bus reading says
    ls[_DUTY] = d
    return d


if not MICROPYTHON:
    state_names(BuckLoop, "st", u_mv=_U, duty=_DUTY, bus_last_mv=_BUS_LAST)
