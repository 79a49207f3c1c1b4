# A plant run that came apart numerically is an error of the simulation, not a verdict on the
# controller: simulate reports it (exit 4) instead of judging limits on its values. A bus far
# above its surge clamp cannot happen in the circuit (the clamp conducts 1 mA x (V/knee)^alpha:
# at 3 x the knee, alpha >= 5, that is over 0.2 A and at the default alpha 35 about 5e13 A), nor
# can a value that is not finite, nor an energy balance off by more than the energy itself.
import math

import numpy as np

from host_sim.errors import UserError

KNEE_FACTOR = 3.0
BALANCE_MAX_PCT = 100.0


def numerical_failure(result):
    """Raise UserError (exit 4) when the run's plant values are numerically impossible."""
    s = result.series
    sc = result.scenario
    knee = sc.doc["bus"]["clamp_knee_v"]
    t = s["t_s"]
    for name in ("bus_v", "machine_rpm"):  # always finite in a sound run (others may be NaN)
        col = s.get(name)
        if col is None:
            continue
        col = np.asarray(col, dtype=float)
        bad = ~np.isfinite(col)
        if name == "bus_v":
            bad |= col > KNEE_FACTOR * knee
        if bad.any():
            i = int(np.argmax(bad))
            x = col[i]
            raise UserError(
                "the plant simulation failed numerically at t = %.3f s (%s = %s%s): not a "
                "verdict on the controller; please report it with the scenario file "
                "(a smaller solver.max_substep_ms may get past it)" % (
                    float(t[i]), name, "%.6g" % float(x),
                    ", above %g x the clamp knee %g V" % (KNEE_FACTOR, knee)
                    if name == "bus_v" and math.isfinite(x) else ""), exit_code=4)
    err = result.ledger.get("balance_error_pct")
    if err is not None and not (abs(err) <= BALANCE_MAX_PCT):
        raise UserError("the plant simulation failed numerically: energy balance error %.6g %% "
                        "(more than the energy itself): not a verdict on the controller; please "
                        "report it with the scenario file" % err, exit_code=4)
