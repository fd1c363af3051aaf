"""Board profiles: everything the firmware knows about hardware, behind one small interface (``base.Board``).

``pico`` (RP2040, also used for ``pico2``/RP2350): photodiode + transimpedance amplifier into the ADC. ``esp32``:
a TSL2591 I2C light sensor with our driver (``tsl2591``). ``sim``: a virtual optical cell with an accelerated clock,
for tests and the demo. Logic modules never import these; ``main.py`` or ``sim_main.py`` builds one and passes it in.
"""
