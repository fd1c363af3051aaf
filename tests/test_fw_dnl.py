"""The RP2040 ADC's non-linear codes (near 512, 1536, 2560 and 3584: the RP2040 datasheet's erratum on ADC DNL,
each about 8 LSB wide [memory]) in the simulated cell, and the firmware's dither that keeps a fading run from
showing a step in absorbance where its signal crosses them. In MicroPython.

The simulated ADC (boards/sim.py ``dnl``) makes those four codes 9 ideal LSB wide and the rest slightly narrower, so
its INL is a sawtooth stepping down 8 LSB at each; noise is 2 counts per read. A dye fades from A = 0.6 towards 0
(first order, k = 0.01 /s) so that the light crosses codes 1536 and 2560 at about 11 and 5 counts a sample. The residual
is measured absorbance minus the cell's true absorbance, A = -log10((I - I_dark)/(I0 - I0_dark)) with I0 the LED's
counts (Beer-Lambert, common practice). A step shows as a change of the residual over two samples far above the
noise of such changes (their robust SD, from the median absolute deviation), both in counts of signal (the change of
absorbance times ln 10 times the signal), where the noise is the same at every light level.

Without dither: the crossing of 1536 gives a step of many noise SDs. With three dither pins (8 offsets of 16
counts, the same for the dark and light reads, so they cancel in light - dark), no change over two samples exceeds
4 SDs anywhere: each code's 8-LSB step is spread over the ~110 counts the offsets span, a ramp instead of a jump.
(The ramp's height, the INL itself, remains: a smooth bias of up to ~0.002 A that dither cannot remove.)
"""

from __future__ import annotations

import statistics

from support.fwharness import results, run_mp

FADE = r"""
import sys, math
from boards.simkit import SimKit
PINS = [int(p) for p in sys.argv[1].split(",")] if sys.argv[1] else []
optics = {"led_counts": 3000, "dark_counts": 100, "noise_counts": 2, "stray": 0.0, "ambient_counts": 0,
          "dnl": True, "dnl_lsb": 8, "dither_counts": 16}
kit = SimKit(blocks=128, settings={"interval_ms": 1000, "warmup_ms": 0, "dither_pins": PINS}, optics=optics)
kit.cell.spec = {"reaction": {"a0": 0.6, "a_inf": 0.0, "k_per_s": 0.01}}
lg = kit.lg
sm = lg.sampler
b = kit.board
print("levels=%d" % b.dither_levels)
kit.request(b"1 start")
n = 0
while lg.samples < 320:
    lg.run(1)
    if lg.samples > n:
        n = lg.samples
        truth = -math.log10(b._t[0])
        got = -math.log10((sm.light[0] - sm.dark[0]) / (16 * 3000))
        print("r=%.6f %.1f %.2f" % (got - truth, sm.light[0] / 16, (sm.light[0] - sm.dark[0]) / 16))
"""


def _fade(pins: str) -> tuple[int, list[float], list[float], list[float]]:
    out = run_mp(FADE, pins)
    res = results(out)
    rows = [line[2:].split() for line in out.splitlines() if line.startswith("r=")]
    return (int(res["levels"]), [float(r[0]) for r in rows], [float(r[1]) for r in rows],
            [float(r[2]) for r in rows])


def _steps(resid: list[float], light: list[float], signal: list[float]) -> tuple[float, float, list[float]]:
    # a change of absorbance in counts of signal (dA · ln 10 · signal): the noise of that is the same at every
    # light level, so one SD serves the whole run
    # over two samples, so that a step the noise happens to split between two samples counts whole
    d = [(b - a) * 2.302585 * s for a, b, s in zip(resid, resid[2:], signal)]
    med = statistics.median(d)
    sd = 1.4826 * statistics.median(abs(x - med) for x in d)
    at = []
    for code in (1536, 2560):
        i = next(i for i, li in enumerate(light) if li >= code)
        at.append(max(abs(x) for x in d[max(0, i - 6):i + 6]))
    return sd, max(abs(x) for x in d), at


def test_a_fading_run_crossing_the_non_linear_codes_shows_no_step_with_dither():
    levels, plain_r, plain_l, plain_s = _fade("")
    assert levels == 1
    sd0, _, at0 = _steps(plain_r, plain_l, plain_s)
    levels, dith_r, dith_l, dith_s = _fade("17,18,19")
    assert levels == 8
    sd1, worst1, at1 = _steps(dith_r, dith_l, dith_s)
    print(f"no dither: noise SD of a change over two samples {sd0:.2f} counts, change at code 1536 {at0[0]:.2f}, "
          f"at 2560 {at0[1]:.2f} counts; dither: SD {sd1:.2f}, largest change anywhere {worst1:.2f} counts "
          f"({worst1 / sd1:.1f} SD), at the codes {at1[0]:.2f} and {at1[1]:.2f} counts")
    assert min(at0) > 5 * sd0  # both crossings step, far above noise
    assert worst1 <= 4 * sd1  # with dither: nowhere a step above noise
    assert len(dith_r) >= 319 and max(dith_l) > 2600 and min(dith_l) < 1500  # both codes were crossed
