"""The ``sim`` board: a virtual optical cell read through the real firmware, with an accelerated clock.

Optics (``schema/simulation.md``): a light read gives dark + led·g·(10^−A + stray)/(1 + stray) + ambient + hum
counts, a dark read dark + ambient + hum, each with Gaussian noise of ``noise_counts``, rounded to 12 bits and
clipped to 0…4095. The LED heats itself: its junction rises towards ``led_heat_k`` kelvin while it is on and cools
back while it is off, both with time constant ``led_tau_s`` (one thermal time constant, a first-order model), and
its output falls by ``led_pct_per_k`` per kelvin: g = 1 − led_pct_per_k/100 · ΔT. Mains hum is
``hum_counts``·sin(2π·``mains_hz``·t) on every read (lamps in the room, pick-up on the wiring). Both are off by
default.
The cell file (what is in the cuvette) is re-read when its ``version`` changes; reaction time zero is the first
moment the board sees a new version. The clock: ``ticks_ms`` wraps at 2^30 ms and runs ``speed`` times faster than
real time; with ``virtual=True`` time moves only when the firmware sleeps or waits (tests run a day in seconds).

Usage::

    clock = SimClock(speed=100, start_ms=0)
    board = SimBoard(config, port, clock, fs_free, rand32)
"""

import json
import math
import os
import random
import time
from boards.base import Board

_MASK = (1 << 30) - 1


def _real_ns():
    try:
        return time.monotonic_ns()  # CPython
    except AttributeError:
        return time.time_ns()  # MicroPython


class SimClock:
    def __init__(self, speed=1, start_ms=0, virtual=False):
        self.speed = speed
        self.virtual = virtual
        self.start = start_ms
        self.t = 0  # board ms elapsed (virtual mode)
        self.us = 0  # and the microseconds past it (virtual mode, from sleep_us)
        self.t0 = _real_ns()

    def elapsed(self):
        if self.virtual:
            return self.t
        return int((_real_ns() - self.t0) * self.speed // 1000000)

    def ticks_ms(self):
        return (self.start + self.elapsed()) & _MASK

    def elapsed_us(self):
        if self.virtual:
            return self.t * 1000 + self.us
        return (_real_ns() - self.t0) * self.speed // 1000

    def sleep_us(self, us):
        if us <= 0:
            return
        if self.virtual:
            us += self.us
            self.t += us // 1000
            self.us = us % 1000
        else:
            time.sleep(us / self.speed / 1000000)

    def sleep_ms(self, ms):
        if ms <= 0:
            return
        if self.virtual:
            self.t += ms
        else:
            time.sleep(ms / self.speed / 1000)

    def wait(self, port, ms):
        """Wait up to ``ms`` board milliseconds for input on ``port``."""
        if ms <= 0:
            return
        if self.virtual:
            if not (hasattr(port, "pending") and port.pending()):
                self.t += ms
        else:
            port.wait(ms / self.speed)


class Cell:
    """What is in the cuvette, from the cell file; absorbance per channel at a board time."""

    def __init__(self, path, speed=1):
        self.path = path
        self.speed = speed
        self.version = None
        self.spec = {"absorbance": 0.0}
        self.t0 = 0
        self.unix0 = 0.0
        self._stamp = None

    def check(self, now_ms):
        if not self.path:
            return
        try:
            st = os.stat(self.path)
        except OSError:
            return
        stamp = (st[6], st[8])
        if stamp == self._stamp:
            return
        self._stamp = stamp
        try:
            with open(self.path) as f:
                spec = json.loads(f.read())
        except (OSError, ValueError):
            return  # half-written by the host: try again next time
        if not isinstance(spec, dict) or spec.get("version") == self.version:
            return
        self.version = spec.get("version")
        self.spec = spec
        self.t0 = now_ms
        self.unix0 = time.time()

    def absorbance(self, ch, now_ms):
        s = self.spec
        if s.get("opaque"):
            return None
        r = s.get("reaction")
        if r:
            t = (now_ms - self.t0) / 1000
            if "since_unix" in r:  # the reaction goes on through a power cut: place it once on the computer's
                # clock, then follow the board's, so a loaded CPU does not jitter each reading's reaction time
                t += (self.unix0 - r["since_unix"]) * self.speed
            a0 = _pick(r.get("a0", 0.0), ch)
            ainf = _pick(r.get("a_inf", 0.0), ch)
            return ainf + (a0 - ainf) * math.exp(-r.get("k_per_s", 0.0) * t)
        return _pick(s.get("absorbance", 0.0), ch)


def _pick(v, ch):
    if isinstance(v, list):
        return float(v[min(ch, len(v) - 1)]) if v else 0.0
    return float(v)


class SimBoard(Board):
    name = "sim"

    def __init__(self, config, port, clock, fs_free, rand32, cell=None):
        Board.__init__(self, port)
        self.config = config
        self.clock = clock
        self.fs_free = fs_free
        self.rand32 = rand32
        self.cell = cell or Cell(config.get("cell"), config.get("speed", 1))
        o = config.get("optics", {})
        self.led_counts = float(o.get("led_counts", 3000))
        self.dark_counts = float(o.get("dark_counts", 100))
        self.noise = float(o.get("noise_counts", 2))
        self.stray = float(o.get("stray", 0.0))
        self.ambient = float(o.get("ambient_counts", 0))
        self.heat_k = float(o.get("led_heat_k", 0))
        self.tau_us = float(o.get("led_tau_s", 20)) * 1e6
        self.pct_per_k = float(o.get("led_pct_per_k", 0.5))
        self.hum = float(o.get("hum_counts", 0))
        self.mains_hz = float(o.get("mains_hz", 50))
        self.hum_phase = float(o.get("hum_phase", 0.0))
        self.dnl = bool(o.get("dnl", False))
        self.dnl_lsb = float(o.get("dnl_lsb", 8))
        self._wide = 1.0 + self.dnl_lsb  # width of each non-linear code, in ideal LSB
        self._narrow = (4096.0 - 4 * self._wide) / 4092  # every other code, so that the 4096 codes fill the range
        self.dither_counts = float(o.get("dither_counts", 6))
        self._level = 0
        self._dt = [0.0] * 5  # junction temperature rise per LED, K
        self._dt_at = [0] * 5  # board µs of the last update
        self.led_on_us = 0  # board µs any LED was lit, for the power budget (duty cycle)
        self._lit_at = -1
        random.seed(int(config.get("seed", 1)))
        self._t = [1.0] * 5  # transmitted fraction per channel at the last before_measure
        self.resets = 0
        # the watchdog as on an RP2040 (8 s in main.py): the longest board time between two feeds, and how many
        # gaps were longer than the timeout (each would have reset a real board)
        self.wdt_ms = int(config.get("watchdog_ms", 8000))
        self.fed_at = clock.elapsed()
        self.wdt_gap = 0
        self.wdt_trips = 0

    def configure(self, settings):
        Board.configure(self, settings)
        self._t = [1.0] * (self.channels + 1)
        self.dither_levels = 1 << len(settings.get("dither_pins") or [])

    def dither(self, level):
        self._level = level

    def _code(self, x):
        """The RP2040-like transfer: codes 512, 1536, 2560, 3584 are ``1 + dnl_lsb`` ideal LSB wide (RP2040
        datasheet erratum on ADC DNL [memory: about 8 LSB]), the others a little narrower, so the INL is a sawtooth
        that steps down by ``dnl_lsb`` at each of those codes."""
        w = self._narrow
        extra = self._wide - w
        m = 0
        for c in (512, 1536, 2560, 3584):
            start = c * w + m * extra
            if x < start:
                break
            if x < start + self._wide:
                return c
            m += 1
        n = int((x - m * extra) / w) if x > 0 else 0
        return 4095 if n > 4095 else n

    # -- time and link ----------------------------------------------------------------------------------------------

    def ticks_ms(self):
        return self.clock.ticks_ms()

    def sleep_us(self, us):
        self.clock.sleep_us(us)

    # -- the LED's own heating ---------------------------------------------------------------------------------------

    def _heat(self, i, now):
        """Bring LED ``i``'s junction temperature up to board µs ``now`` under its current state."""
        dt = now - self._dt_at[i]
        self._dt_at[i] = now
        if dt <= 0:
            return
        target = self.heat_k if self._led_state[i] else 0.0
        self._dt[i] = target + (self._dt[i] - target) * math.exp(-dt / self.tau_us)

    def led(self, i, on):
        if on != self._led_state[i]:
            now = self.clock.elapsed_us()
            if self.heat_k:
                self._heat(i, now)
            if on:
                self._lit_at = now
            elif self._lit_at >= 0:
                self.led_on_us += now - self._lit_at
                self._lit_at = -1
        Board.led(self, i, on)

    def sleep_ms(self, ms):
        while ms > 0:  # as the Pico profile: long sleeps in steps of 1 s, feeding the watchdog after each
            step = ms if ms < 1000 else 1000
            self.clock.sleep_ms(step)
            self.feed()
            ms -= step

    def feed(self):
        now = self.clock.elapsed()
        gap = now - self.fed_at
        if gap > self.wdt_gap:
            self.wdt_gap = gap
        if gap > self.wdt_ms:
            self.wdt_trips += 1
        self.fed_at = now

    def starved_ms(self):
        """Board ms since the last feed (a test's last look at the watchdog)."""
        return self.clock.elapsed() - self.fed_at

    def wait_input(self, ms):
        self.clock.wait(self.port, ms)

    # -- the virtual cell -------------------------------------------------------------------------------------------

    def before_measure(self, now_ms):
        c = self.cell
        c.check(now_ms)
        s = self.stray
        for ch in range(self.channels):
            if ch == self.reference:
                self._t[ch] = 1.0  # the reference photodiode sees the LED directly
                continue
            a = c.absorbance(ch, now_ms)
            t = 0.0 if a is None else 10 ** (-a)
            self._t[ch] = (t + s) / (1 + s)

    def _gauss(self):
        u = random.random()
        while u <= 1e-12:
            u = random.random()
        return math.sqrt(-2 * math.log(u)) * math.cos(6.283185307179586 * random.random())

    def read(self, ch):
        v = self.dark_counts + self.ambient
        led = self._led_of[ch]
        if self._led_state[led]:
            g = 1.0
            if self.heat_k:
                self._heat(led, self.clock.elapsed_us())
                g = 1.0 - self.pct_per_k / 100 * self._dt[led]
            v += self.led_counts * g * self._t[ch]
        if self.hum:
            v += self.hum * math.sin(6.283185307179586 * (self.mains_hz * self.clock.elapsed_us() / 1e6
                                                          + self.hum_phase))
        if self._level:
            v += self.dither_counts * self._level
        if self.noise:
            v += self.noise * self._gauss()
        if self.dnl:
            return self._code(v + 0.5)
        v = int(v + 0.5) if v > 0 else 0
        return 4095 if v > 4095 else v

    def full_scale(self, ch):
        return 4095

    # -- identity and lifecycle -------------------------------------------------------------------------------------

    def device_id(self):
        return str(self.config.get("device", "5100000000000001"))

    def reset_cause(self):
        return 0  # a sim board only ever starts from "power on" (a restart after kill is a power cut)

    def reset(self):
        self.resets += 1
        raise SystemExit(0)  # the host starts the process again
