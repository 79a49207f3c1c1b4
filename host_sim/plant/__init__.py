# Plant simulator: the physical world around the controller, one module per part.
#   machine  permanent-magnet DC machine          drive    pedal, crank, wind, hydro, scripted
#   diode    bridge diodes (SPICE-style curve)    battery  lead-acid block
#   supercap series bank with spread and bleeders usb      5 V converter, data lines, devices
#   loads    battery-side loads                   sensors  ADC models and injected faults
#   events   timed faults and requests            plant    the bus that ties them together
