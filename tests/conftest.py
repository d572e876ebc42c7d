"""Shared test helpers: the one way to run ``cubage`` in a subprocess, in-process runs, problem files.

Fixtures
--------
cubage
    ``cubage(*args, cwd=..., timeout=60, input=None)`` runs ``python -m cubage ARGS`` in a
    subprocess of this tree (a CompletedProcess, text); ``cubage.start(...)`` starts one
    (a Popen with stdout/stderr pipes); ``cubage.wait_for(cond, proc, ...)`` polls a condition
    while the process lives.
cli
    ``cli(*args, cwd=None)`` runs :func:`cubage.cli.commands.main` in this process (fast) and
    returns an object with ``returncode``, ``stdout``, ``stderr`` (also a tuple: ``code, out, err = cli(...)``).
write_problem
    ``write_problem(name, text)`` writes a problem file into the test's ``tmp_path``.
catchable_signals
    SIGINT, SIGTERM and SIGHUP at their terminal defaults in this process for one test (a suite started in the
    background or under ``nohup`` inherits some of them ignored, and cubage keeps an ignored signal ignored).
    ``as_from_a_terminal`` does the same for a child (``preexec_fn``; ``cubage.start`` uses it).
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

#: the signals that stop a cubage command
STOP_SIGNALS = ("SIGINT", "SIGTERM", "SIGHUP")


def as_from_a_terminal() -> None:
    """``preexec_fn`` of a child that receives signals in a test: SIGINT, SIGTERM and SIGHUP at their defaults."""
    import signal
    for name in STOP_SIGNALS:
        signal.signal(getattr(signal, name), signal.SIG_DFL)


def cubage_env(extra: dict | None = None) -> dict:
    """The environment of a cubage subprocess: this tree first on the path, no terminal width."""
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env.pop("COLUMNS", None)
    if extra:
        env.update(extra)
    return env


class CubageProcess:
    """The one subprocess helper of the test suite (see the module docstring)."""

    argv0 = (sys.executable, "-m", "cubage")

    def __call__(self, *args, cwd=None, timeout: float = 60, input: str | None = None,
                 env: dict | None = None) -> subprocess.CompletedProcess:
        return subprocess.run([*self.argv0, *map(str, args)], cwd=cwd, env=cubage_env(env), capture_output=True,
                              text=True, timeout=timeout, input=input,
                              stdin=None if input is not None else subprocess.DEVNULL)

    def start(self, *args, cwd=None, env: dict | None = None, **popen) -> subprocess.Popen:
        popen.setdefault("stdout", subprocess.PIPE)
        popen.setdefault("stderr", subprocess.PIPE)
        popen.setdefault("stdin", subprocess.DEVNULL)
        popen.setdefault("preexec_fn", as_from_a_terminal)
        return subprocess.Popen([*self.argv0, *map(str, args)], cwd=cwd, env=cubage_env(env), text=True, **popen)

    @staticmethod
    def wait_for(cond, proc: subprocess.Popen, timeout: float = 60.0, what: str = "condition") -> None:
        """Poll ``cond()`` every 50 ms; fail the test if ``proc`` ends first or time runs out."""
        t0 = time.monotonic()
        while not cond():
            if proc.poll() is not None:
                out, err = proc.communicate()
                pytest.fail(f"process ended (rc {proc.returncode}) before {what}: {(err or '')[-2000:]}")
            if time.monotonic() - t0 > timeout:
                proc.kill()
                proc.communicate()
                pytest.fail(f"timed out waiting for {what}")
            time.sleep(0.05)


@pytest.fixture(scope="session")
def cubage() -> CubageProcess:
    """Run ``python -m cubage`` of this tree in a subprocess."""
    return CubageProcess()


class InProcess:
    """What :func:`cubage.cli.commands.main` returned and printed, run in this process."""

    def __init__(self, argv, capsys):
        from cubage.cli.commands import main
        capsys.readouterr()
        self.returncode = main([str(a) for a in argv])
        cap = capsys.readouterr()
        self.stdout, self.stderr = cap.out, cap.err

    def __iter__(self):
        return iter((self.returncode, self.stdout, self.stderr))

    def __getitem__(self, i):
        return (self.returncode, self.stdout, self.stderr)[i]


@pytest.fixture
def cli(capsys, monkeypatch):
    """``cli(*argv, cwd=...)``: ``cubage.cli.commands.main`` in this process, its output captured."""
    def call(*argv, cwd=None):
        if cwd is not None:
            monkeypatch.chdir(cwd)
        return InProcess(argv, capsys)
    return call


@pytest.fixture
def catchable_signals():
    """SIGINT, SIGTERM and SIGHUP at their terminal defaults in this process during the test, restored after."""
    import signal
    old = {}
    for name in STOP_SIGNALS:
        sig = getattr(signal, name)
        if signal.getsignal(sig) is signal.SIG_IGN:
            old[sig] = signal.signal(sig, signal.default_int_handler if name == "SIGINT" else signal.SIG_DFL)
    yield
    for sig, handler in old.items():
        signal.signal(sig, handler)


@pytest.fixture
def write_problem(tmp_path):
    """``write_problem(name, text)`` -> the path of a new problem file in ``tmp_path``."""
    def write(name: str, text: str) -> Path:
        p = tmp_path / name
        p.write_text(text, encoding="utf-8")
        return p
    return write


def screen_host(screen):
    """A bare Textual app that shows ``screen`` on mount (for pilot tests of one screen)."""
    from textual.app import App

    class Host(App):
        def on_mount(self):
            self.push_screen(screen)

    return Host()
