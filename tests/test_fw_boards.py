"""Board profiles with stand-in hardware, in MicroPython: pins, ADC scaling, the TSL2591 driver, the probe, the
button and the status LED; and a bad settings file, which must give EVENT 2, blink code 2 and the safe defaults.

Pin defaults are checked against schema/settings_default.json and the pin table of hardware_notes/wiring.md (both
outside the firmware). The RP2040 ``read_u16`` scaling (12-bit value v returned as v << 4 | v >> 8) is recalled from
MicroPython's rp2 port source [memory]; the test only relies on the top 12 bits being v.
"""

import json

from support.fwharness import SCHEMA, results, run_mp

FAKES = r"""
import sys, json
class Clock:
    t = 0
    @staticmethod
    def ticks_ms(): return Clock.t & ((1 << 30) - 1)
    @staticmethod
    def ticks_diff(a, b): return ((a - b + (1 << 29)) & ((1 << 30) - 1)) - (1 << 29)
    @staticmethod
    def sleep_ms(ms): Clock.t += ms

class Pin:
    OUT = 1; IN = 0; PULL_UP = 2
    log = {}
    level = {}
    def __init__(self, id, mode=None, pull=None, value=None):
        self.id = id
        Pin.log.setdefault(id, []).append(("init", mode, pull))
        if value is not None:
            self.value(value)
    def value(self, v=None):
        if v is None:
            return Pin.level.get(self.id, 1)
        Pin.level[self.id] = v
        Pin.log[self.id].append((Clock.t, v))

class ADC:
    made = []
    def __init__(self, src):
        self.src = src if isinstance(src, int) else src.id
        ADC.made.append(self.src)
    def read_u16(self):
        lit = Pin.level.get(15, 0)
        v = 3000 if lit else 200
        if self.src == 4:
            v = 876   # about 0.706 V: 27 °C
        return (v << 4) | (v >> 8)

class I2C:
    def __init__(self, bus, sda=None, scl=None, freq=None):
        self.args = (bus, sda.id, scl.id)
        self.regs = {0x12: 0x50, 0x13: 1}
    def readfrom_mem_into(self, addr, reg, buf):
        assert addr == 0x29 and reg & 0xA0 == 0xA0
        reg &= 0x1F
        if reg == 0x14:
            lit = Pin.level.get(25, 0)
            v0, v1 = (30000, 4000) if lit else (50, 7)
            buf[0] = v0 & 255; buf[1] = v0 >> 8; buf[2] = v1 & 255; buf[3] = v1 >> 8
        else:
            buf[0] = self.regs.get(reg, 0)
    def writeto_mem(self, addr, reg, buf):
        self.regs[reg & 0x1F] = buf[0]

class Machine:
    Pin = Pin; ADC = ADC; I2C = I2C
    PWRON_RESET = 1; WDT_RESET = 3
    def unique_id(self): return b"\xe6\x61\x41\x03\xe7\x45\x2d\x2f"
    def reset_cause(self): return 3
    def reset(self): raise SystemExit(0)

class OS:
    def statvfs(self, p):
        import os
        return os.statvfs("/flash")
    def urandom(self, n):
        import os
        return os.urandom(n)

class Port:
    def __init__(self): self.inbox = bytearray(); self.sent = bytearray()
    def readinto(self, buf):
        n = min(len(buf), len(self.inbox))
        buf[:n] = self.inbox[:n]; self.inbox[:n] = b""
        return n
    def write(self, b): self.sent += b
    def wait(self, ms): Clock.t += int(ms)

import vfs
from boards.simflash import RamBlockDevice
dev = RamBlockDevice(48)
vfs.VfsLfs2.mkfs(dev, progsize=256)
vfs.mount(vfs.VfsLfs2(dev, progsize=256), "/flash")
"""

PICO = FAKES + r"""
from boards.pico import PicoBoard
from nightcell_fw import settings as S
from nightcell_fw.sampler import Sampler
b = PicoBoard(Machine(), Port(), Clock, OS())
s = S.defaults()
b.configure(s)
print("device=" + b.device_id())
print("cause=%d" % b.reset_cause())
print("adcs=" + json.dumps(ADC.made))
print("pins=" + json.dumps(sorted([str(k) for k in Pin.log])))
print("button_pull=%d" % (Pin.log[16][0][2] == Pin.PULL_UP))
sm = Sampler(b)
sm.configure(16, 5, b.channels, 200)
flags = sm.measure()
print("dark=%d" % sm.dark[0])
print("light=%d" % sm.light[0])
print("flags=%d" % flags)
print("chip=%d" % b.chip_temp_centi())
print("led_after=%d" % Pin.level[15])
"""

ESP = FAKES + r"""
from boards.esp32 import Esp32Board, DEFAULTS
from nightcell_fw import settings as S
from nightcell_fw.sampler import Sampler
s = S.validate(DEFAULTS)
b = Esp32Board(Machine(), Port(), Clock, OS())
b.configure(s)
print("i2c=" + json.dumps(b.sensor.i2c.args))
print("pins=" + json.dumps(sorted([str(k) for k in Pin.log])))
sm = Sampler(b)
sm.configure(2, 5, b.channels, 200)
t0 = Clock.t
flags = sm.measure()
print("dark=%d" % sm.dark[0])
print("light=%d" % sm.light[0])
print("took_ms=%d" % (Clock.t - t0))
print("full=%d" % b.full_scale(0))
"""


def test_pico_profile_uses_default_pins_and_undoes_the_adc_shift():
    res = results(run_mp(PICO))
    assert res["device"] == "e6614103e7452d2f"
    assert res["cause"] == "1"  # machine.WDT_RESET → record code 1 (schema/records.md)
    defaults = json.loads((SCHEMA / "settings_default.json").read_text())
    ch = defaults["channels"][0]
    assert json.loads(res["adcs"]) == [ch["adc"], 4]  # light on GP26, chip temperature on ADC channel 4
    assert set(json.loads(res["pins"])) == {str(ch["led"]), str(ch["adc"]), str(defaults["button_pin"]),
                                            defaults["status_led"]}
    assert res["button_pull"] == "1"
    assert int(res["dark"]) == 16 * 200 and int(res["light"]) == 16 * 3000 and res["flags"] == "0"
    assert abs(int(res["chip"]) - 2700) < 100  # 0.706 V is 27 °C in the RP2040 datasheet formula [memory]
    assert res["led_after"] == "0"  # the LED is off after a sample


def test_pico_optional_pins_match_the_wiring_notes():
    # hardware_notes/wiring.md pin table: second LED GP14, reference ADC1 GP27, DS18B20 GP22, button GP16
    out = run_mp("from boards import pico, esp32\n"
                 "print('p=%d,%d,%d,%d,%d,%d,%s' % (pico.MAIN_LED, pico.SECOND_LED, pico.LIGHT_ADC, "
                 "pico.REFERENCE_ADC, pico.PROBE_PIN, pico.BUTTON_PIN, pico.STATUS_LED))\n"
                 "print('e=%d,%d,%d,%d,%d' % (esp32.MAIN_LED, esp32.SECOND_LED, esp32.PROBE_PIN, esp32.BUTTON_PIN,"
                 " esp32.STATUS_LED))\n")
    res = results(out)
    assert res["p"] == "15,14,26,27,22,16,LED"
    assert res["e"] == "25,26,4,0,2"
    wiring = (SCHEMA.parent / "hardware_notes" / "wiring.md").read_text()
    for text in ("GP26 (ADC0)", "GP27 (ADC1)", "| GP15 | GPIO25 |", "| GP14 | GPIO26 |", "| GP22 | GPIO4 |",
                 "| GP16 | GPIO0", "address 0x29", "GPIO21", "GPIO22", "GPIO2 |"):
        assert text in wiring, text
    defaults = json.loads((SCHEMA / "settings_default.json").read_text())
    assert defaults["i2c"] == {"sda": 21, "scl": 22, "sensor": "tsl2591", "address": 0x29}


def test_esp32_profile_reads_the_tsl2591_fresh_after_each_led_switch():
    res = results(run_mp(ESP))
    assert json.loads(res["i2c"]) == [0, 21, 22]
    assert {"25", "0", "2"} <= set(json.loads(res["pins"]))
    assert int(res["dark"]) == 2 * 50 and int(res["light"]) == 2 * 30000
    assert int(res["took_ms"]) >= 4 * 100  # four fresh 100 ms conversions, never a stale one
    assert res["full"] == "37888"


BAD_SETTINGS = FAKES + r"""
from boards.pico import PicoBoard
from nightcell_fw import settings as S
from nightcell_fw.logger import Logger
f = open("/flash/settings.json", "w"); f.write('{"interval_ms": 5, "reads": 16'); f.close()
s, problem = S.load("/flash/settings.json")
print("problem=" + str(problem))
b = PicoBoard(Machine(), Port(), Clock, OS())
b.configure(s)
lg = Logger(b, s, problem, "/flash")
lg.boot()
t0 = Clock.t
while Clock.t - t0 < 9000:
    lg.run(1)
# blinks in one 3-s period of the status LED
ons = [t for t, v in Pin.log["LED"][1:] if v == 1 and t0 + 3000 <= t < t0 + 6000]
print("blinks=%d" % len(ons))
print("interval=%d" % lg.settings["interval_ms"])
buf = bytearray(4096)
start, n = lg.journal.read(0, 4096, memoryview(buf))
import struct
kinds = []
i = 0
while i < n:
    L = buf[i + 2] | buf[i + 3] << 8
    kinds.append("%d/%d" % (buf[i + 1], buf[i + 16] if buf[i + 1] == 5 else 0))
    i += L + 8
print("kinds=" + ",".join(kinds))
# a short press marks, a long press starts a run
Pin.level[16] = 0
t1 = Clock.t
while Clock.t - t1 < 200:
    lg.run(1)
Pin.level[16] = 1
while Clock.t - t1 < 400:
    lg.run(1)
Pin.level[16] = 0
t1 = Clock.t
while Clock.t - t1 < 2000:
    lg.run(1)
Pin.level[16] = 1
while Clock.t - t1 < 2500:
    lg.run(1)
print("running=%d" % lg.running)
start, n = lg.journal.read(0, 4096, memoryview(buf))
marks = []
i = 0
while i < n:
    L = buf[i + 2] | buf[i + 3] << 8
    if buf[i + 1] == 3:
        marks.append("%d/%d" % (buf[i + 16], buf[i + 17]))
    i += L + 8
print("marks=" + ",".join(marks))
"""


def test_bad_settings_file_gives_event_blink_code_and_safe_defaults():
    res = results(run_mp(BAD_SETTINGS))
    assert "settings.json ignored" in res["problem"]
    assert res["interval"] == "10000"  # the safe default, not the broken file's 5
    kinds = res["kinds"].split(",")
    assert kinds[:2] == ["1/0", "6/0"] and "5/2" in kinds  # BOOT, SETTINGS, EVENT 2
    assert res["blinks"] == "2"  # our blink code 2: settings ignored
    assert res["marks"] == "6/1,4/1"  # short press: note from the button; long press: run start from the button
    assert res["running"] == "1"


def test_settings_validation_messages_say_what_to_do():
    script = r"""
from nightcell_fw import settings as S
for bad in ({"interval_ms": 10}, {"reads": 0}, {"colour": 1}, {"channels": []}, {"label": "x" * 40},
            {"path_cm": 20}, {"i2c": {"sda": 1}}, {"board": "uno"}, {"reads": True}):
    try:
        S.validate(bad)
        print("accepted=" + repr(bad))
    except ValueError as e:
        print("msg=" + str(e))
"""
    out = run_mp(script)
    assert "accepted=" not in out
    msgs = [line[4:] for line in out.splitlines() if line.startswith("msg=")]
    assert len(msgs) == 9
    assert msgs[0] == "interval_ms must be a whole number from 200 to 86400000, not 10"
    assert msgs[2].startswith("unknown setting \"colour\": the settings are board, button_pin, channels")
    assert msgs[7] == "board must be one of pico, pico2, esp32, sim, not \"uno\""


PROBE_AND_CHANNELS = FAKES + r"""
import binascii
class OneWire:
    def __init__(self, pin): self.pin = pin
class DS18X20:
    def __init__(self, ow): self.ow = ow
    def scan(self): return [b"\x28\x01\x02\x03\x04\x05\x06\x07"]
    def convert_temp(self): pass
    def read_temp(self, rom): return 23.456
class OW: OneWire = OneWire
class DS: DS18X20 = DS18X20
from boards.pico import PicoBoard
from nightcell_fw import settings as S
from nightcell_fw.logger import Logger
s = S.validate({"temp_pin": 22, "reference_adc": 27, "warmup_ms": 0, "interval_ms": 1000,
                "channels": [{"name": "main", "led": 15, "adc": 26}, {"name": "second", "led": 14, "adc": 26}]})
b = PicoBoard(Machine(), Port(), Clock, OS(), onewire=OW, ds18x20=DS)
b.configure(s)
lg = Logger(b, s, None, "/flash")
lg.boot()
lg.start_run(0, "")
t0 = Clock.t
while Clock.t - t0 < 10000:
    lg.run(1)
lg.close_block()
buf = bytearray(4096)
start, n = lg.journal.read(0, 4096, memoryview(buf))
print("journal=" + binascii.hexlify(buf[:n]).decode())
print("adcs=" + json.dumps(ADC.made))
"""


def test_probe_temperature_second_led_and_reference_channel_are_journaled():
    from nightcell.wire import frames as F

    res = results(run_mp(PROBE_AND_CHANNELS))
    recs = list(F.iter_records(bytes.fromhex(res["journal"]), 0))  # decoded by the host's reference codec
    blocks = [r for r in recs if r.kind == F.KIND_SAMPLES]
    assert blocks and all(r.fields["channels"] == 3 and r.fields["options"] == 1 for r in blocks)
    samples = [s for r in blocks for s in r.samples()]
    assert len(samples) >= 8
    # the first reading comes before the first conversion has finished; after that, 23.456 °C in centi-degrees
    assert samples[-1].temp_centi == 2346
    for smp in samples:
        # the stand-in photodiode on GP26 sees light only while LED GP15 is lit: main lit, second dark, and the
        # reference (GP27) read while the first channel's LED is on
        assert smp.light[0] == 16 * 3000 and smp.light[1] == 16 * 200 and smp.light[2] == 16 * 3000
        assert smp.dark == [16 * 200] * 3
    assert json.loads(res["adcs"]) == [26, 26, 27, 4]


def test_a_board_without_settings_runs_the_profile_of_its_chip():
    # sys.implementation._machine names the chip on the rp2 port, e.g. "Raspberry Pi Pico2 with RP2350" [memory]
    out = run_mp(r"""
from boards.choose import board_name
for raw, platform, machine in (({}, "rp2", "Raspberry Pi Pico2 with RP2350"), ({}, "rp2", "Raspberry Pi Pico with RP2040"),
                               (None, "esp32", "Generic ESP32 module with ESP32"), ({"board": "sim"}, "rp2", "RP2350"),
                               ({"board": "uno"}, "rp2", "Raspberry Pi Pico W with RP2040")):
    print("name=" + board_name(raw, platform, machine))
""")
    names = [line[5:] for line in out.splitlines() if line.startswith("name=")]
    assert names == ["pico2", "pico", "esp32", "sim", "pico"]


BUTTON = FAKES + r"""
from boards.pico import PicoBoard
from nightcell_fw import settings as S
from nightcell_fw.logger import Logger
s = S.validate({"interval_ms": 1000, "warmup_ms": 0})
b = PicoBoard(Machine(), Port(), Clock, OS())
b.configure(s)
lg = Logger(b, s, None, "/flash")
lg.boot()
def press(ms, then=600):
    Pin.level[16] = 0
    t = Clock.t
    while Clock.t - t < ms:
        lg.run(1)
    Pin.level[16] = 1
    t = Clock.t
    while Clock.t - t < then:
        lg.run(1)
press(2000)
print("started=%d" % lg.running)
press(2000, 8000)                 # one long press during a run (a leaning box): the run goes on
print("after_one=%d" % lg.running)
press(2000, 1000); press(2000)    # two long presses within 5 s: the distinct gesture that stops it
print("after_two=%d" % lg.running)
"""


def test_one_long_press_never_stops_a_run_two_within_five_seconds_do():
    res = results(run_mp(BUTTON))
    assert res == {**res, "started": "1", "after_one": "1", "after_two": "0"}


ESP_FITS = FAKES + r"""
from boards.esp32 import Esp32Board, DEFAULTS
from nightcell_fw import settings as S
from nightcell_fw.logger import Logger
s = S.validate(dict(DEFAULTS, interval_ms=1000))
b = Esp32Board(Machine(), Port(), Clock, OS())
b.configure(s)
lg = Logger(b, s, None, "/flash")
lg.boot()
print("measure_ms=%d" % lg.measure_ms())
t0 = Clock.t
lg.sampler.measure()
print("took_ms=%d" % (Clock.t - t0))
for key, value in (("reads", 16), ("interval_ms", 200)):
    try:
        lg.change(key, value)
        print("accepted=" + key)
    except ValueError as e:
        print("refused_%s=%s" % (key, e))
print("interval=%d" % lg.settings["interval_ms"])
# a settings file written for a Pico (16 reads, 1 s) on this board: journaled, and the interval made to fit
lg2 = Logger(b, S.validate(dict(DEFAULTS, reads=16, interval_ms=1000)), None, "/flash")
print("problem=" + lg2.problem)
print("interval2=%d" % lg2.settings["interval_ms"])
"""


def test_the_board_refuses_an_interval_shorter_than_its_measurement():
    res = results(run_mp(ESP_FITS))
    # ESP32 defaults: one dark and one light TSL2591 conversion of 100 ms + 20 ms margin each (tsl2591.py)
    assert res["measure_ms"] == "240" and res["took_ms"] == "240"
    # 16 pairs of two conversions, 20 ms window: 16 × 240 ms + 15 rests of 1.25 ms
    assert res["refused_reads"].startswith("interval_ms 1000 is shorter than one measurement on this board (3858 ms")
    assert "choose at least 3908" in res["refused_reads"]
    assert res["refused_interval_ms"].startswith("interval_ms 200 is shorter than one measurement")
    assert res["interval"] == "1000"
    assert "interval_ms 3908 used" in res["problem"] and res["interval2"] == "3908"
