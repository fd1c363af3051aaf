"""The board interface the firmware logic uses, with the parts every profile shares.

A profile subclasses ``Board`` and fills in the hardware methods. Channels: ``settings["channels"]`` lists the LED
and light input of each measurement channel; a reference photodiode (``reference_adc``) is one more, last channel,
read while the first channel's LED is on. ``led(i, on)`` takes an LED index (one per measurement channel).

Usage::

    board = SomeBoard(...)
    board.configure(settings)      # ValueError if the pins cannot be used
    board.read(0), board.led(0, True), board.ticks_ms()
"""


class Board:
    name = "board"
    fast_poll = False  # the loop turns every 50 ms (button, status LED) instead of up to 1 s
    has_probe = False
    has_button = False
    has_status_led = False
    dither_levels = 1  # offsets the ADC dither resistors give (2 ** pins); 1 when none are fitted
    fault = None  # type: str | None  # text of a part that failed while configuring (journaled, retried with back-off)

    def __init__(self, port):
        self.port = port
        self.channels = 1
        self._leds = 1
        self._led_of = [0]
        self._led_state = [False]
        self.reference = -1  # channel index of the reference photodiode, -1 when none

    def configure(self, settings):
        chans = settings["channels"]
        self._leds = len(chans)
        self._led_of = list(range(len(chans)))
        self.reference = -1
        if settings["reference_adc"] is not None:
            self.reference = len(chans)
            self._led_of.append(0)
        self.channels = len(self._led_of)
        self._led_state = [False] * self._leds

    # -- LEDs -------------------------------------------------------------------------------------------------------

    def led_of(self, ch):
        return self._led_of[ch]

    def led(self, i, on):
        self._led_state[i] = on
        self._drive(i, on)

    def leds_off(self):
        for i in range(self._leds):
            self.led(i, False)

    def leds_on(self, on):
        for i in range(self._leds):
            self.led(i, on)

    def _drive(self, i, on):
        pass

    # -- defaults for optional parts --------------------------------------------------------------------------------

    def temperature(self):
        return None

    def chip_temp_centi(self):
        return -32768

    def vsys_mv(self):
        return 0

    def button(self):
        return False

    def status_led(self, on):
        pass

    def before_measure(self, now_ms):
        pass

    def dither(self, level):
        """Set the ADC dither offset to ``level`` (0 … dither_levels − 1); nothing to do without dither pins."""
        pass

    def conversion_ms(self):
        """Board ms one read takes beyond the settle waits (0 for an ADC; a sensor's integration time)."""
        return 0

    def sleep_ms(self, ms):
        raise NotImplementedError("a board profile sleeps its own way (feeding the watchdog)")

    def sleep_us(self, us):
        self.sleep_ms((us + 999) // 1000)

    def feed(self):
        pass
