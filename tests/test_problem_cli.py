"""``cubage check`` and ``cubage list`` on good and bad problems, and how a problem name is found.

In-process calls of :func:`cubage.cli.commands.main` (no interpreter start per
case).  Expected integrals are closed forms named beside each check.
"""

from __future__ import annotations

import json

import pytest

from cubage.cli.commands import main

GOOD = ('title = "product"\n[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n'
        '[integrand]\nexpr = "x * y"\n[reference]\nvalue = 0.25\nsource = "by hand: (1/2)^2"\n')
BAD_EXPR = '[domain]\nvariables = ["x"]\nbox = [[0, 1]]\n[integrand]\nexpr = "q"\n'
DEEP = "a = " + "[" * 3000 + "]" * 3000 + "\n"
HUGE = GOOD.replace("value = 0.25", "value = " + "9" * 401)
FIFTY = ('[domain]\nvariables = [' + ", ".join(f'"v{i}"' for i in range(50)) + ']\nbox = ['
         + ", ".join(["[0, 1]"] * 50) + ']\n[integrand]\nexpr = "v0"\n')


def run(capsys, *argv) -> tuple[int, str, str]:
    capsys.readouterr()
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def write(folder, name, text):
    f = folder / name
    f.write_text(text, encoding="utf-8")
    return f


def test_check_several_files(tmp_path, capsys):
    """issue 10 item 20: check accepts several files, describes the good ones and exits 2 if any is bad."""
    good, bad = write(tmp_path, "good.toml", GOOD), write(tmp_path, "bad.toml", BAD_EXPR)
    code, out, err = run(capsys, "check", good, bad)
    assert code == 2
    assert "ok: the problem is valid" in out and "product" in out
    assert err.splitlines()[0].startswith(f"{bad}:5: [integrand] expr: unknown name 'q'")
    assert "Traceback" not in err
    code, out, _ = run(capsys, "check", good, good)
    assert code == 0 and out.count("ok: the problem is valid") == 2


@pytest.mark.parametrize("text,where", [(BAD_EXPR, "[integrand] expr"), (DEEP, "nest"), (HUGE, "401 digits"),
                                        (FIFTY, "genz-malik supports 2 to 15 dimensions")],
                         ids=["expr", "deep", "huge", "fifty-dims"])
def test_check_json_reports_bad_input_as_json(tmp_path, capsys, text, where):
    """issue 10 items 6, 11, 20: --json prints one JSON object with the error, exit 2, no traceback."""
    good, bad = write(tmp_path, "good.toml", GOOD), write(tmp_path, "bad.toml", text)
    code, out, err = run(capsys, "check", "--json", good, bad)
    assert code == 2 and "Traceback" not in err
    obj = json.loads(out)
    assert obj["ok"] is False
    first, second = obj["problems"]
    assert first["ok"] is True and first["rule"] == "gauss-kronrod" and first["nodes_per_region"] == 225
    assert first["problem"]["reference"]["value"] == 0.25 and first["description"]["title"] == "product"
    assert second["ok"] is False and second["error"] == "bad-input" and where in second["message"]
    assert second["message"].startswith(str(bad))


def test_list_marks_bad_files_invalid_and_goes_on(tmp_path, capsys):
    """issue 10 item 11: one bad file (deep nesting, huge number, ...) is listed as invalid, never a failure."""
    write(tmp_path, "good.toml", GOOD)
    write(tmp_path, "deep.toml", DEEP)
    write(tmp_path, "huge.toml", HUGE)
    (tmp_path / "binary.toml").write_bytes(b"\xff\xfe\x00")
    code, out, err = run(capsys, "list", tmp_path)
    assert code == 0 and "Traceback" not in err
    rows = {ln.split()[0]: ln for ln in out.splitlines()[1:]}
    assert set(rows) == {"good", "deep", "huge", "binary"}
    assert "product" in rows["good"] and "2" in rows["good"].split()
    for name in ("deep", "huge", "binary"):
        assert "invalid" in rows[name]
    code, out, _ = run(capsys, "list", tmp_path, "--json")
    obj = json.loads(out)
    by = {e["name"]: e for e in obj["problems"]}
    assert code == 0 and by["good"]["ok"] and by["good"]["dimension"] == 2
    assert not by["deep"]["ok"] and "nest" in by["deep"]["error"]["message"]


def test_list_does_not_import_python_integrands(tmp_path, capsys):
    """issue 11 item 4: listing reads problems as data; a Python integrand's module is not run."""
    marker = tmp_path / "imported"
    write(tmp_path, "mine.py", f"open({str(marker)!r}, 'w').close()\ndef f(X):\n    return X[:, 0]\n")
    write(tmp_path, "py.toml", 'title = "mine"\n[domain]\nvariables = ["x"]\nbox = [[0, 1]]\n'
                               '[integrand]\npython = "mine.py:f"\n')
    code, out, _ = run(capsys, "list", tmp_path)
    assert code == 0 and "mine" in out and "--allow-python" in out
    assert not marker.exists()


def test_run_name_finds_the_file_in_the_current_folder(tmp_path, capsys, monkeypatch):
    """issue 10 item 21: 'cubage run NAME' with NAME.toml in the current folder runs it."""
    write(tmp_path, "product.toml", GOOD)
    monkeypatch.chdir(tmp_path)
    code, out, err = run(capsys, "run", "product", "--json")
    assert code == 0, err
    rec = json.loads(out)
    assert rec["value"] == pytest.approx(0.25, abs=1e-12)   # (1/2)^2, by hand


def test_run_on_a_folder_points_the_right_way(tmp_path, capsys):
    """issue 10 item 21: 'cubage run DIR' says it is a folder and what to give instead."""
    write(tmp_path, "product.toml", GOOD)
    code, _, err = run(capsys, "run", tmp_path)
    assert code == 2
    line = err.strip().splitlines()[0]
    assert "is a folder" in line and "product.toml" in line and "cubage resume" in line


def test_resume_notices_an_edited_python_module(tmp_path, capsys):
    """issue 10 item 15e: editing the module between a run and its resume is noticed (exit 2, one line)."""
    write(tmp_path, "mine.py", "def f(X):\n    return X[:, 0]\n")
    f = write(tmp_path, "p.toml", '[domain]\nvariables = ["x", "y"]\nbox = [[0, 1], [0, 1]]\n'
                                  '[integrand]\npython = "mine.py:f"\n[goal]\nbudget = 1000\nrel_tol = 1e-15\n')
    rd = tmp_path / "rd"
    code, _, err = run(capsys, "run", f, "--allow-python", "--run-dir", rd, "--json")
    assert code == 3, err                      # budget spent: the run stops short, a checkpoint is kept
    write(tmp_path, "mine.py", "def f(X):\n    return 2 * X[:, 0]\n")
    code, _, err = run(capsys, "resume", rd, "--allow-python", "--budget", "5000")
    assert code == 2 and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1
