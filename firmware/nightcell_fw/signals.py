"""The status LED's blink codes and the push button, polled from the main loop (no timers, no interrupts).

Blink codes (ours): the LED flashes N times, then stays dark, every 3 s, for the most serious condition present —
2 flashes: settings file ignored, defaults in use; 3: journal full, logging stopped; 4: an error was caught in the
last minute (it is in the journal). With nothing to report the LED gives one short blink every 3 s while a run is
going, and stays dark when idle.

Button: a short press journals a note mark from the button; a press held for 1.5 s starts a run (acted on while
still held, so the user sees the LED answer). One long press never stops a run (a leaning object must not end a
week of logging): during a run the first long press arms the stop (journaled as a note "stop armed") and only a
second long press within 5 s stops it.

Usage::

    sig = Signals(board); sig.set(CODE_FULL); sig.show(now_ms)
    btn = Button(board); btn.poll(logger, now_ms)
"""

from micropython import const

CODE_SETTINGS = const(2)
CODE_FULL = const(3)
CODE_ERROR = const(4)
_PERIOD = const(3000)
_ON = const(150)
_STEP = const(400)
_ERROR_MS = const(60000)
_LONG_MS = const(1500)
_DEBOUNCE_MS = const(40)
_ARMED_MS = const(5000)  # the second long press that stops a run must come within this time of the first


class Signals:
    def __init__(self, board):
        self.board = board
        self.codes = 0  # bit per code
        self.error_at = 0
        self.running = False
        self._lit = None

    def set(self, code):
        self.codes |= 1 << code
        self.error_at = -1 if code == CODE_ERROR else self.error_at

    def clear(self, code):
        self.codes &= ~(1 << code)

    def active(self, code):
        return bool(self.codes & (1 << code))

    def busy(self):
        return self.board.has_status_led and (self.codes or self.running)

    def code(self):
        for c in (CODE_FULL, CODE_SETTINGS, CODE_ERROR):
            if self.codes & (1 << c):
                return c
        return 1 if self.running else 0

    def show(self, now):
        if self.error_at == -1:
            self.error_at = now
        elif self.codes & (1 << CODE_ERROR) and now - self.error_at > _ERROR_MS:
            self.clear(CODE_ERROR)
        if not self.board.has_status_led:
            return
        n = self.code()
        phase = now % _PERIOD
        lit = phase < n * _STEP and phase % _STEP < (_ON if n > 1 else 40)
        if lit != self._lit:
            self._lit = lit
            self.board.status_led(lit)


class Button:
    def __init__(self, board):
        self.board = board
        self.down_at = -1
        self.done = False
        self._raw = False
        self._since = 0
        self.armed_at = -1  # uptime of the long press that armed a stop, -1 when none

    def poll(self, lg, now):
        if not self.board.has_button:
            return
        raw = self.board.button()
        if raw != self._raw:
            self._raw = raw
            self._since = now
            return
        if now - self._since < _DEBOUNCE_MS:
            return
        if raw:
            if self.down_at < 0:
                self.down_at = now
                self.done = False
            elif not self.done and now - self.down_at >= _LONG_MS:
                self.done = True
                if not lg.running:
                    lg.start_run(1, "button")
                elif self.armed_at >= 0 and now - self.armed_at <= _ARMED_MS:
                    self.armed_at = -1
                    lg.stop_run(1)
                else:
                    self.armed_at = now
                    lg.mark(6, 1, "stop armed", "", measure=False)
        elif self.down_at >= 0:
            if not self.done:
                lg.mark(6, 1, "button", "", measure=False)
            self.down_at = -1
