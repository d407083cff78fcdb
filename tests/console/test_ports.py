"""`diffdeck ports`: what pyserial's port listing knows, a clear line when there is nothing, and honest advice.

What is honest to test here: on Linux pyserial's listing (serial.tools.list_ports) scans the kernel's serial
devices (/dev/ttyS*, ttyUSB*, ttyACM*, ... with their sysfs entries); a pseudo-terminal is not one of them, so a pty
the test creates cannot appear in the real listing. The test checks that first, with pyserial itself; if a pyserial
ever lists it, the verb must list it too. Otherwise it hands pyserial's own port object for that pty
(list_ports_linux.SysFS, what the listing builds for a device) to the verb in place of the scan, so the verb's output
is checked against what pyserial reports for a real device node, and it checks that the loopback URL the verb
advises (`loop://`) really opens and echoes through pyserial.
"""

from __future__ import annotations

import os

import pytest
import serial
from serial.tools import list_ports, list_ports_linux

from console.cli import main


@pytest.fixture
def pty_device():
    controller, device = os.openpty()
    try:
        yield os.ttyname(device)
    finally:
        os.close(controller)
        os.close(device)


def test_a_pty_the_test_creates_is_listed_with_what_pyserial_knows(pty_device: str, monkeypatch: pytest.MonkeyPatch,
                                                                   capsys: pytest.CaptureFixture[str]) -> None:
    seen_by_pyserial = [p for p in list_ports.comports(include_links=True) if p.device == pty_device]
    if not seen_by_pyserial:
        port = list_ports_linux.SysFS(pty_device)          # pyserial's own description of that device node
        monkeypatch.setattr(list_ports, "comports", lambda include_links=False: [port])
        seen_by_pyserial = [port]
    assert main(["ports", "--links"]) == 0
    out = capsys.readouterr().out
    line = next(line for line in out.splitlines() if pty_device in line)
    port = seen_by_pyserial[0]
    assert (port.description or "n/a") in line and (port.hwid or "n/a") in line
    assert "\u2026" not in out                                   # nothing cut (rich's ellipsis)


def test_no_ports_is_one_clear_line(monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setattr(list_ports, "comports", lambda include_links=False: [])
    assert main(["ports"]) == 0
    out = capsys.readouterr().out
    assert out.splitlines()[0].startswith("no serial ports found")


def test_the_loopback_url_it_advises_opens_and_echoes(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["ports"]) == 0
    assert "`loop://`" in capsys.readouterr().out
    link = serial.serial_for_url("loop://", timeout=1.0)
    try:
        link.write(b"ping\n")
        assert link.readline() == b"ping\n"
    finally:
        link.close()
