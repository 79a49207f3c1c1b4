# spinrail controller: pure-Python charge-control logic that runs unchanged on MicroPython
# and on CPython. Nothing here imports machine, numpy or host_sim.
