"""limbclock fix: human output with the cautions, --json equals engine.reduce_session, clean errors."""
import json
import os

from host import cli
from host.cautions import CAUTION_LINES

SESSION = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "vectors", "sessions",
                       "mislabelled.json")


def test_json_is_reduce_session(capsys):
    import engine
    assert cli.main(["fix", SESSION, "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    with open(SESSION) as f:
        ref = engine.reduce_session(f.read())
    assert out == json.loads(json.dumps(ref))
    for key in ("utc", "lat_deg", "lon_deg", "ellipse_95", "contacts_used", "rejected", "images"):
        assert key in out


def test_human_output(capsys):
    assert cli.main(["fix", SESSION, "--at", "2030-10-20T21:00:00Z"]) == 0
    out = capsys.readouterr().out
    assert "Fix at 2030-10-20T21:00:00.000Z" in out and "95% ellipse" in out
    assert "used, relabelled: timed as i05 upper, fits as image i04" in out and "REJECTED" not in out
    for line in CAUTION_LINES:
        assert line in out
    assert cli.main(["fix", SESSION, "--keep-labels"]) == 0
    out = capsys.readouterr().out
    assert "REJECTED" in out and "probably mislabelled" in out


def test_bad_input_one_line_exit_2(tmp_path, capsys):
    p = tmp_path / "s.json"
    p.write_text('{"format": "limbclock-session/1", "observer": {}}')
    assert cli.main(["fix", str(p)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "observer.eye_height_m: missing" in err[0]
    assert cli.main(["fix", str(tmp_path / "none.json")]) == 2
    assert cli.main(["fix", SESSION, "--at", "yesterday"]) == 2
