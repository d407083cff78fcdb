"""`bench` on a real link opens the port before it asks for the wheels to go up: a port that cannot be opened is
one line at once, and an operator who declines leaves nothing behind."""

from __future__ import annotations

import io
from pathlib import Path

import pytest

from console.cli import main
from console.verbs.bench import CONFIRMATION

ROOT = Path(__file__).resolve().parents[3]


def test_a_port_that_cannot_be_opened_is_one_line_before_any_caution(tmp_path: Path,
                                                                      monkeypatch: pytest.MonkeyPatch,
                                                                      capsys: pytest.CaptureFixture[str]) -> None:
    stdin = io.StringIO(f"{CONFIRMATION}\n")
    monkeypatch.setattr("sys.stdin", stdin)
    missing = tmp_path / "ttyNONE"
    code = main(["bench", str(ROOT / "profiles" / "wren.toml"), "step", "--link", str(missing),
                 "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 5
    assert str(missing) in err and CONFIRMATION not in err      # never asked: nothing could have moved
    assert stdin.tell() == 0 and not (tmp_path / "out").exists()


def test_declining_after_the_port_opened_closes_it_and_keeps_no_recording(tmp_path: Path,
                                                                          monkeypatch: pytest.MonkeyPatch,
                                                                          capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setattr("sys.stdin", io.StringIO("no\n"))
    out = tmp_path / "out"
    code = main(["bench", str(ROOT / "profiles" / "wren.toml"), "step", "--link", "loop://", "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and CONFIRMATION in err.splitlines()[-1]
    assert not out.exists() or list(out.iterdir()) == []
