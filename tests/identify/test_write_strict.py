import json, pytest
from host_sim.cli import main

def test_write_refuses_a_target_with_duplicate_keys(tmp_path, capsys):
    """--write reads its target with the project's strict JSON reader: a scenario file with a
    key written twice is refused with the key named, and left as it was."""
    import shutil
    from pathlib import Path
    root = Path(__file__).resolve().parents[2]
    target = tmp_path / "site.json"
    target.write_text('{"name": "a", "name": "b"}')
    rc = main(["identify", "machine", str(root / "host_sim/data/bench/machine.csv"),
               "--write", str(target)])
    err = capsys.readouterr().err
    assert rc == 2 and "name" in err and "not overwritten" in err
    assert target.read_text() == '{"name": "a", "name": "b"}'
