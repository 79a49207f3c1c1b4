# Fixtures for the link tests: a virtual board (the MicroPython unix port on a pty) and one
# flashed with the shipped default profile.
import json

import pytest

from controller.profile import default_path


@pytest.fixture
def board_dir(tmp_path):
    d = tmp_path / "board_fs"
    d.mkdir()
    return d


@pytest.fixture
def virtual_board(micropython, board_dir):
    from host_sim.virtualboard import VirtualBoard
    vb = VirtualBoard(str(board_dir), exe=micropython)
    vb.start()
    yield vb
    vb.stop()


@pytest.fixture(scope="module")
def flashed(micropython, tmp_path_factory):
    """A virtual board flashed once with the default profile: (board, port, FlashResult)."""
    from host_sim import deploy
    from host_sim.virtualboard import VirtualBoard
    d = tmp_path_factory.mktemp("flashed_fs")
    vb = VirtualBoard(str(d), exe=micropython)
    port = vb.start()
    r = deploy.flash(port, "virtual")
    yield vb, port, r
    vb.stop()


@pytest.fixture
def other_profile(tmp_path):
    """The default profile with a different float voltage (a second, valid version)."""
    with open(default_path()) as f:
        doc = json.load(f)
    doc["battery"]["float_v_per_cell"] = 2.25
    p = tmp_path / "other.json"
    p.write_text(json.dumps(doc))
    return str(p)
