"""The drive console in a real terminal: a detached tmux session of fixed size, keys in with send-keys, the screen
out with capture-pane. Shared by the tmux end-to-end test and the console benchmark."""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
TMUX = shutil.which("tmux")


def tmux_missing_reason() -> str | None:
    """Why a tmux test cannot run here (None: it can). On CI a missing tmux is an error, never a skip."""
    if TMUX is not None:
        return None
    if os.environ.get("CI"):
        raise RuntimeError("tmux is missing on CI: .ci/run installs it; the console's terminal tests cannot run")
    return "tmux is not installed (CI unset): the real-terminal console tests need it; .ci/run installs it"


class TmuxConsole:
    """`python -m console drive ...` (or another verb) in its own tmux server and session; `close()` always kills both.

    A private server (-L): a shared one hands new panes the environment it was started with (another process's
    COLUMNS / LINES would fix the app's idea of the terminal size), and other users' sessions stay out of reach.
    """

    def __init__(self, drive_args: list[str], *, size: tuple[int, int] = (120, 40),
                 env: dict[str, str] | None = None, cwd: Path = ROOT, verb: str = "drive") -> None:
        assert TMUX is not None
        self.name = f"diffdeck-test-{os.getpid()}-{time.monotonic_ns() % 10**9}"
        self.tmux = [TMUX, "-L", self.name, "-f", "/dev/null"]
        command = " ".join(shlex.quote(part) for part in [sys.executable, "-m", "console", verb, *drive_args])
        exports = "unset COLUMNS LINES; " + "".join(f"export {key}={shlex.quote(value)}; "
                                                     for key, value in (env or {}).items())
        self.size = size
        width, height = size
        subprocess.run([*self.tmux, "new-session", "-d", "-s", self.name, "-x", str(width), "-y", str(height),
                        "-c", str(cwd), f"{exports}exec {command}"], check=True)

    def started(self, pattern: str, timeout_s: float = 30.0) -> str:
        """Wait for the first screen, then nudge the window size once and back.

        On a loaded machine an app occasionally comes up at tmux's default 80x24 although the pane is bigger; two
        resizes (two SIGWINCH) make it read the real size, so what a test sees never depends on that race.
        """
        self.wait_for(pattern, timeout_s)
        width, height = self.size
        for rows in (height - 1, height):
            subprocess.run([*self.tmux, "resize-window", "-t", self.name, "-x", str(width), "-y", str(rows)],
                           check=True)
            time.sleep(0.3)
        return self.wait_for(pattern, timeout_s)

    def armed(self) -> str:
        """From the first screen on the simulated robot: wait for its telemetry (arming is possible only then),
        arm with a, enter, and return the screen once it says ARMED."""
        self.started(r"DISARMED")
        self.wait_for(r"telemetry +≤ \d+ ms ago")
        self.keys("a")
        self.wait_for(r"ENTER")
        self.keys("Enter")
        return self.wait_for(r"(?<![A-Z])ARMED(?![A-Z])")

    def keys(self, *keys: str) -> None:
        subprocess.run([*self.tmux, "send-keys", "-t", self.name, *keys], check=True)

    def screen(self) -> str:
        done = subprocess.run([*self.tmux, "capture-pane", "-p", "-t", self.name], capture_output=True, text=True)
        return done.stdout

    def alive(self) -> bool:
        return subprocess.run([*self.tmux, "has-session", "-t", self.name], capture_output=True).returncode == 0

    def pid(self) -> int:
        done = subprocess.run([*self.tmux, "display-message", "-p", "-t", self.name, "#{pane_pid}"],
                              capture_output=True, text=True, check=True)
        return int(done.stdout.strip())

    def wait_for(self, pattern: str, timeout_s: float = 20.0) -> str:
        """The screen once `pattern` (a regex) is on it; AssertionError with the last screen after the timeout."""
        deadline = time.monotonic() + timeout_s
        screen = ""
        while time.monotonic() < deadline:
            screen = self.screen()
            if re.search(pattern, screen):
                return screen
            time.sleep(0.1)
        raise AssertionError(f"{pattern!r} not on the screen after {timeout_s} s:\n{screen}")

    def wait_closed(self, timeout_s: float = 15.0) -> bool:
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if not self.alive():
                return True
            time.sleep(0.1)
        return False

    def close(self) -> None:
        if self.alive():
            subprocess.run([*self.tmux, "kill-session", "-t", self.name], capture_output=True)
        subprocess.run([*self.tmux, "kill-server"], capture_output=True)
