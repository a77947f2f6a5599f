"""Helpers for the live end-to-end test: a private JACK dummy server and a client that plays
a recording into it.

The dummy backend runs on a real clock and hands PortAudio exact float32
samples, so a recording played into it arrives bit for bit in ``popmeter
listen`` (see ../shared design note "testing-live"). The player connects its
output port to the first input port that is not the server's own ``system:``
ports (PortAudio's ``PortAudio:in_0`` once its stream opens) and starts
playing only once that connection exists.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import threading
import time
from pathlib import Path
from typing import Self

import numpy as np


class JackUnavailable(RuntimeError):
    """jackd or the JACK-Client package cannot be used here (the reason is the message)."""


class DummyJackServer:
    """``jackd --no-realtime -n NAME -d dummy -r RATE -p PERIOD -C 2 -P 2`` in the background.

    Use as a context manager; the server is killed (by its pid) on exit.
    ``env`` is the environment for child processes (JACK_DEFAULT_SERVER set).
    """

    def __init__(self, name: str, *, sample_rate_hz: int = 48000, period_frames: int = 512,
                 log_path: Path | None = None):
        self.name = name
        self.sample_rate_hz = sample_rate_hz
        self.period_frames = period_frames
        self.log_path = log_path
        self.proc: subprocess.Popen | None = None
        self.env = dict(os.environ, JACK_DEFAULT_SERVER=name, JACK_NO_AUDIO_RESERVATION="1")

    def start(self, timeout_s: float = 10.0) -> None:
        jackd = shutil.which("jackd")
        if jackd is None:
            raise JackUnavailable("jackd not installed (apt-get install jackd2)")
        try:
            import jack  # noqa: F401
        except (ImportError, OSError) as exc:
            raise JackUnavailable(f"JACK-Client unusable: {exc}") from None
        cmd = [jackd, "--no-realtime", "-n", self.name, "-d", "dummy",
               "-r", str(self.sample_rate_hz), "-p", str(self.period_frames), "-C", "2", "-P", "2"]
        if self.log_path:
            with open(self.log_path, "wb") as log:  # the child keeps its own copy of the fd
                self.proc = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT,
                                             env=self.env)
        else:
            self.proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL,
                                         stderr=subprocess.STDOUT, env=self.env)
        deadline = time.monotonic() + timeout_s
        last_error = None
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise JackUnavailable(f"jackd exited with code {self.proc.returncode}")
            try:
                client = self._client("popmeter-probe")
                client.close()
                return
            except Exception as exc:  # noqa: BLE001 - jack.JackOpenError until it is up
                last_error = exc
                time.sleep(0.1)
        self.stop()
        raise JackUnavailable(f"jackd did not come up within {timeout_s:g} s ({last_error})")

    def _client(self, name: str):
        import jack

        return jack.Client(name, servername=self.name, no_start_server=True)

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(5)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(5)
        self.proc = None

    def __enter__(self) -> Self:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


class Player:
    """A JACK client with one output port that plays ``samples`` once, then silence.

    :meth:`connect_when_ready` waits for a foreign input port, connects to it
    and only then starts playback. ``done`` is set after the last sample.
    """

    def __init__(self, server: DummyJackServer, samples: np.ndarray, *, name: str = "feeder"):
        import jack

        self.samples = np.ascontiguousarray(samples, dtype=np.float32).reshape(-1)
        self.client = jack.Client(name, servername=server.name, no_start_server=True)
        if self.client.samplerate != server.sample_rate_hz:
            raise JackUnavailable(f"server runs at {self.client.samplerate} Hz")
        self.port = self.client.outports.register("out")
        self.pos = 0
        self.playing = threading.Event()
        self.done = threading.Event()
        self.client.set_process_callback(self._process)
        self.client.activate()

    def _process(self, frames: int) -> None:
        buf = self.port.get_array()
        if not self.playing.is_set() or self.pos >= len(self.samples):
            buf[:] = 0.0
            if self.pos >= len(self.samples):
                self.done.set()
            return
        chunk = self.samples[self.pos:self.pos + frames]
        buf[:len(chunk)] = chunk
        buf[len(chunk):] = 0.0
        self.pos += len(chunk)

    def connect_when_ready(self, timeout_s: float = 15.0, *, start_delay_s: float = 0.3) -> str:
        """Connect to the first non-``system:`` input port and start playing; returns its name.

        PortAudio registers its ports when the stream is opened, a moment
        before it starts taking audio; playback begins ``start_delay_s`` after
        the connection so that the first samples are not played into a stream
        that has not started yet.
        """
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            ports = [p for p in self.client.get_ports(is_audio=True, is_input=True)
                     if not p.name.startswith("system:") and not p.name.startswith(self.client.name)]
            if ports:
                self.client.connect(self.port, ports[0])
                time.sleep(start_delay_s)
                self.playing.set()
                return ports[0].name
            time.sleep(0.02)
        raise TimeoutError("no capture input port appeared (is the listener running?)")

    def close(self) -> None:
        try:
            self.client.deactivate()
        finally:
            self.client.close()


def align(saved: np.ndarray, source: np.ndarray, *, probe: int = 256) -> tuple[int, int]:
    """Where the source starts in a capture: ``(offset, skipped)``.

    ``offset`` is the index in ``saved`` of the first captured source sample,
    ``skipped`` the number of source samples played before the capture began
    (0 when the whole source was captured). Found by exact match of ``probe``
    samples after the first non-zero captured sample (silence before playback
    is exact zeros on the JACK dummy backend).
    """
    nz = np.flatnonzero(saved)
    if len(nz) == 0:
        raise AssertionError("the capture holds only zeros")
    first = int(nz[0])
    want = saved[first:first + probe]
    for k in np.flatnonzero(source == saved[first]):
        k = int(k)
        if np.array_equal(source[k:k + len(want)], want):
            return first, k
    raise AssertionError("the captured samples are not an exact copy of the source")
