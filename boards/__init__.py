# spinrail boards: one JSON definition per board, the host-side validator (board.py, chips.py)
# and the firmware that runs on the board (main.py, hal.py, stub_main.py). Only hal.py imports
# machine, and only on a real chip.
