# Host-side setpoint helpers of the lead-acid charger (CPython only: the board's tick works the
# same out from its profile slots in LeadAcidCharger.update; the tests hold the two equal).
# leadacid.py re-exports them on the host.
from controller import leadacid as _la
from controller.signals import ST_ABSORPTION, ST_BULK, ST_EQUALIZE


def comp_mv(p, cell_mv, temp_dc):
    """Block setpoint for a per-cell voltage at a battery temperature, compensated by the
    profile's coefficient; the temperature is clamped to the charging window first.
    Integer: cells x (cell_mv + tc_uv_dc x dT / 1000)."""
    if temp_dc < p.temp_min_dc:
        temp_dc = p.temp_min_dc
    elif temp_dc > p.temp_max_dc:
        temp_dc = p.temp_max_dc
    n = p.cells
    return n * cell_mv + (n * p.tc_uv_dc_cell * (temp_dc - p.ref_temp_dc)) // 1000


def ceiling_mv(p, stage, temp_dc):
    """The stage's compensated voltage ceiling for the block, mV, within the hard caps.
    (The tick works the same out in LeadAcidCharger.update from its profile slots; the tests
    hold the two equal.)"""
    if temp_dc < p.temp_min_dc:
        temp_dc = p.temp_min_dc
    elif temp_dc > p.temp_max_dc:
        temp_dc = p.temp_max_dc
    n = p.cells
    if stage == ST_ABSORPTION or stage == ST_BULK:
        v = n * p.abs_cell_mv
        top = n * _la._CAP_ABS_CELL_MV
    elif stage == ST_EQUALIZE:
        v = n * p.eq_cell_mv
        top = n * _la._CAP_EQ_CELL_MV
    else:
        v = n * p.float_cell_mv
        top = n * _la._CAP_FLOAT_CELL_MV
    v += (n * p.tc_uv_dc_cell * (temp_dc - p.ref_temp_dc)) // 1000
    return top if v > top else v
