# Parameter identification from bench logs: a salvaged permanent-magnet DC machine (K_e, R_a,
# brush drop), a supercap bank (capacitance and DC internal resistance, per cell) and a lead-acid
# battery (ohmic and polarisation resistance, time constant, state of charge). Each module reads a
# CSV log, fits, and returns a result object the command line prints and writes as a fragment.
