"""Hardware notes: files present, safety that defers to local rules, pins matching the firmware defaults,
an index that links every note, and the notes' own arithmetic re-done.

Sources named beside each check. Pin numbers are the board defaults the firmware settings must match (the
project's pin contract). Other references: common practice (LED colour bands) and the stray-light formula
A_obs = -log10((T + s)/(1 + s)) (a standard spectrophotometry result [memory]).
"""

import json
import math
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
NOTES = ROOT / "hardware_notes"
EXPECTED_NOTES = {
    "README.md", "parts.md", "wiring.md", "led_per_analyte.md", "holder.md",
    "power.md", "linux.md", "windows_macos.md", "check_procedure.md",
}
# Notes that certainly discuss chemicals, LEDs or batteries; guards the keyword detector below.
KNOWN_HAZARD_NOTES = EXPECTED_NOTES - {"linux.md", "windows_macos.md"}
HAZARD_WORDS = re.compile(
    r"\b(hydroxide|acids?|iodine|dyes?|dichromate|copper|reagents?|LEDs?|batter(y|ies)|lithium|power banks?)\b",
    re.IGNORECASE,
)


def read(name):
    return (NOTES / name).read_text(encoding="utf-8")


def section(text, heading):
    """Body of the '## heading' section (up to the next '## ')."""
    match = re.search(rf"^## {re.escape(heading)}[^\n]*\n(.*?)(?=^## |\Z)", text, re.M | re.S)
    return match.group(1) if match else None


def table_rows(block):
    """Cells of each markdown table row in block, header and separator rows dropped."""
    rows = [
        [cell.strip() for cell in line.strip().strip("|").split("|")]
        for line in block.splitlines()
        if line.strip().startswith("|")
    ]
    return [r for r in rows[2:] if not all(set(c) <= set("-: ") for c in r)]


def test_every_note_exists_and_has_content():
    present = {p.name for p in NOTES.glob("*.md")}
    assert EXPECTED_NOTES <= present, f"missing notes: {sorted(EXPECTED_NOTES - present)}"
    for name in EXPECTED_NOTES:
        assert len(read(name).splitlines()) >= 20, f"{name} is too short to be a note"


def test_readme_links_every_file_and_every_link_resolves():
    readme = read("README.md")
    targets = set(re.findall(r"\]\(([^)#\s]+)\)", readme))
    others = {p.name for p in NOTES.iterdir() if p.is_file() and p.name != "README.md"}
    assert others <= targets, f"README does not link: {sorted(others - targets)}"
    for target in targets:
        if "://" not in target:
            assert (NOTES / target).is_file(), f"README links a missing file: {target}"


def test_readme_puts_safety_up_front():
    # Project rule 4: safety is shown where the work can hurt someone, so it comes before the index.
    readme = read("README.md")
    safety, index = readme.find("## Safety"), readme.find("## The notes")
    assert 0 <= safety < index, "README must have its Safety section before the index of notes"


def test_hazard_notes_have_safety_section_deferring_to_local_rules():
    flagged = {p.name for p in NOTES.glob("*.md") if HAZARD_WORDS.search(p.read_text(encoding="utf-8"))}
    assert KNOWN_HAZARD_NOTES <= flagged, f"detector missed: {sorted(KNOWN_HAZARD_NOTES - flagged)}"
    for name in sorted(flagged):
        body = section(read(name), "Safety")
        assert body is not None, f"{name} discusses chemicals, LEDs or batteries but has no '## Safety' section"
        assert "local rules" in body, f"{name}: Safety section must defer to local rules"
    readme_safety = section(read("README.md"), "Safety (read first)") or ""
    assert "qualified supervision" in readme_safety


# Board pin defaults (the firmware's settings defaults match these exactly).
PIN_TABLE = {
    # row label start: (Pico pins, ESP32 pins, other text that must appear in the row)
    "Light signal": (["GP26"], [], ["ADC0", "0x29"]),
    "Reference photodiode": (["GP27"], [], ["ADC1"]),
    "I2C SDA": ([], ["GPIO21"], []),
    "I2C SCL": ([], ["GPIO22"], []),
    "Main LED": (["GP15"], ["GPIO25"], []),
    "Second-wavelength LED": (["GP14"], ["GPIO26"], []),
    "DS18B20": (["GP22"], ["GPIO4"], ["4.7 kΩ"]),
    "Push button": (["GP16"], ["GPIO0"], []),
    "Status LED": (["GP25"], ["GPIO2"], ['"LED"']),
    # the dither resistors of the RP2040's non-linear codes ("dither_pins": [17, 18, 19])
    "ADC dither resistors": (["GP17", "GP18", "GP19"], [], ["100 kΩ"]),
    # firmware/boards/choose.py: PICO_SAFE_PIN, ESP32_SAFE_PIN
    "Safe-mode jumper": (["GP20"], ["GPIO32"], ["pin 26", "GND"]),
}
PICO_PIN = re.compile(r"\bGP\d+\b")
ESP_PIN = re.compile(r"\bGPIO\d+\b")


def test_wiring_pin_table_matches_board_defaults():
    rows = table_rows(section(read("wiring.md"), "Pin table") or "")
    by_label = {}
    for label, pico, esp in (r[:3] for r in rows):
        key = next((k for k in PIN_TABLE if label.startswith(k)), None)
        assert key is not None, f"unexpected row in pin table: {label}"
        by_label[key] = (pico, esp, label)
    assert set(by_label) == set(PIN_TABLE), f"pin table rows missing: {sorted(set(PIN_TABLE) - set(by_label))}"
    for key, (pico_want, esp_want, extra) in PIN_TABLE.items():
        pico, esp, _label = by_label[key]
        assert PICO_PIN.findall(pico) == pico_want, f"{key}: Pico pins {PICO_PIN.findall(pico)} != {pico_want}"
        assert ESP_PIN.findall(esp) == esp_want, f"{key}: ESP32 pins {ESP_PIN.findall(esp)} != {esp_want}"
        row = " ".join(by_label[key])
        for text in extra:
            assert text in row, f"{key}: row must mention {text}"


def test_wiring_mentions_no_pin_outside_the_defaults():
    # Catches a typo'd pin anywhere in the prose or diagrams. GP23 is allowed: it is discussed as the Pico's
    # regulator-mode pin, not used by the cell. GP20 and GPIO32 are the safe-mode jumper's (boards/choose.py), GP17-19 the dither resistors'.
    text = read("wiring.md")
    assert set(PICO_PIN.findall(text)) <= {"GP14", "GP15", "GP16", "GP17", "GP18", "GP19", "GP20", "GP22", "GP23",
                                             "GP25", "GP26", "GP27"}
    esp = {int(p[4:]) for p in ESP_PIN.findall(text)}
    assert esp <= {0, 2, 4, 21, 22, 25, 26, 32}, f"unexpected ESP32 pins: {sorted(esp)}"
    assert "0x29" in section(text, "ESP32 variant (TSL2591 light sensor)")



def test_pin_table_agrees_with_the_firmware_settings_contract():
    # schema/settings_default.json is what the firmware boots with; the notes must not promise other pins.
    defaults = json.loads((ROOT / "schema" / "settings_default.json").read_text(encoding="utf-8"))
    main = next(c for c in defaults["channels"] if c["name"] == "main")
    assert f"GP{main['led']}" == PIN_TABLE["Main LED"][0][0]
    assert f"GP{main['adc']}" == PIN_TABLE["Light signal"][0][0]
    assert f"GP{defaults['button_pin']}" == PIN_TABLE["Push button"][0][0]
    assert defaults["status_led"] == "LED"
    i2c = defaults["i2c"]
    assert [f"GPIO{i2c['sda']}", f"GPIO{i2c['scl']}"] == PIN_TABLE["I2C SDA"][1] + PIN_TABLE["I2C SCL"][1]
    assert (i2c["sensor"], i2c["address"]) == ("tsl2591", 0x29)
    # Optional parts are off by default, so the notes must tell the builder which settings turn them on,
    # and the LED must settle inside the firmware's default wait (8.3 time constants to one 12-bit count).
    assert defaults["reference_adc"] is None and defaults["temp_pin"] is None
    settings = section(read("wiring.md"), "Settings to match the wiring") or ""
    for setting in ('"reference_adc": 27', '"temp_pin": 22', '"led": 14', '"board": "esp32"', '"led": 25',
                    '"button_pin": 0', '"status_led": 2', '"temp_pin": 4'):
        assert setting in settings, f"wiring.md does not say how to set {setting}"
    rf, cf = re.search(r"Rf ([\d.]+) MΩ ]-+\+\n.*?Cf (\d+) pF", read("wiring.md"), re.S).groups()
    assert float(rf) * 1e6 * int(cf) * 1e-12 * math.log(4096) * 1e3 < defaults["settle_ms"]

# Approximate colour-name bands for LEDs, nm — common practice (no single source) [memory].
COLOUR_BANDS = {
    "violet": (400, 450), "blue": (450, 490), "blue-green": (490, 510), "green": (510, 570),
    "yellow": (570, 590), "amber": (585, 600), "orange": (600, 620), "red": (620, 700), "infrared": (700, 1000),
}


def test_led_colour_names_agree_with_their_wavelengths():
    rows = table_rows(section(read("led_per_analyte.md"), "Table") or "")
    assert len(rows) >= 5
    for analyte, _solution, led, wavelength, _basis in rows:
        names = [n.strip() for n in re.split(r"\bto\b|/|\bor\b", led) if n.strip()]
        assert names and all(n in COLOUR_BANDS for n in names), f"{analyte}: unknown LED colour {led!r}"
        for nm in map(int, re.findall(r"\d+", wavelength)):
            assert any(COLOUR_BANDS[n][0] <= nm <= COLOUR_BANDS[n][1] for n in names), (
                f"{analyte}: {nm} nm is not {led}"
            )
    # Common practice (no single source): the usual LED for three classic analytes.
    table = {r[0].split(" (")[0]: (r[2], r[3]) for r in rows}
    assert table["Crystal violet fading in hydroxide"][1] == "590"
    assert table["Phosphate as molybdenum blue"][1] == "880"
    assert table["Nitrite by the Griess reaction"][1] == "540"


# USB ids of the boards and bridges the host looks for (vendor ids as registered with the USB-IF [memory]).
USB_IDS = {("2e8a", "0005"), ("10c4", "ea60"), ("1a86", "7523"), ("1a86", "55d4"), ("0403", "6001"), ("303a", "1001")}


def test_udev_rule_covers_ids_in_lower_case_and_is_well_formed():
    block = re.search(r"```\n(.*?)```", section(read("linux.md"), "The rule") or "", re.S).group(1)
    pairs = re.findall(r'ATTRS\{idVendor\}=="([^"]+)", ATTRS\{idProduct\}=="([^"]+)"', block)
    # Compared in lower case on purpose: udev matches sysfs text, which is lower-case hex (common practice).
    assert set(pairs) == USB_IDS
    assert 'ENV{ID_MM_DEVICE_IGNORE}="1"' in block
    gotos, labels = set(re.findall(r'GOTO="(\w+)"', block)), set(re.findall(r'LABEL="(\w+)"', block))
    assert gotos and gotos <= labels, f"GOTO without LABEL: {sorted(gotos - labels)}"


def test_power_note_warns_about_the_rp2_reformat():
    # MicroPython rp2 port, ports/rp2/modules/_boot.py: on a failed mount it runs VfsLfs2.mkfs and mounts again.
    body = read("power.md")
    assert re.search(r"fails?, it formats the flash", body)
    for must in ("Never interrupt a firmware update mid-write", "Sync before you reflash",
                 "never use other tools that write the board's flash filesystem"):
        assert must in body


def test_stray_light_table_follows_the_formula():
    # A_obs = -log10((T + s)/(1 + s)), standard spectrophotometry result [memory]; REFERENCES: 1 % stray light
    # caps readings near A = 2 and reads A = 1 about 4 % low.
    rows = table_rows(section(read("check_procedure.md"), "Procedure") or "")
    stray = [r for r in rows if re.fullmatch(r"[\d.]+ %", r[0])]
    assert len(stray) == 4
    for s_text, cap, at_1, at_15 in stray:
        s = float(s_text.split()[0]) / 100
        a_obs = lambda a: -math.log10((10 ** -a + s) / (1 + s))  # noqa: E731
        assert float(cap.split()[0]) == pytest.approx(-math.log10(s / (1 + s)), abs=0.05)
        assert float(at_1.split()[0]) == pytest.approx(a_obs(1.0), abs=0.0015)
        assert float(at_15.split()[0]) == pytest.approx(a_obs(1.5), abs=0.0015)
    one_percent = -math.log10((0.1 + 0.01) / 1.01)
    assert 0.955 < one_percent < 0.97  # "about 4 % low"


def test_feedback_resistor_worked_value():
    # V_out = Vb + I_ph * Rf; 12-bit code = V/3.3 V * 4095; RP2040-E11 non-linear codes 512/1536/2560/3584.
    rows = table_rows(section(read("wiring.md"), "Pico front end") or "")
    worked = [r for r in rows if r[0].strip("*").endswith("MΩ")]
    assert len(worked) == 3
    chosen = None
    for rf_text, vout, code, *_rest in worked:
        rf = float(rf_text.strip("*").split()[0]) * 1e6
        v = 0.105 + 2.0e-6 * rf
        assert float(vout.strip("*").split()[0]) == pytest.approx(v, abs=0.001)
        assert int(code.strip("*")) == round(v / 3.3 * 4095)
        if rf_text.startswith("**"):
            chosen = (v, round(v / 3.3 * 4095))
    v, c = chosen
    assert 0.70 <= v / 3.3 <= 0.85 and v < 3.0
    assert min(abs(c - bad) for bad in (512, 1536, 2560, 3584)) > 100


def test_windows_and_macos_steps_name_the_ports_and_the_socket_sim():
    text = read("windows_macos.md")
    for needed in ("Device Manager", "COM3", "NIGHTCELL_PORT", "/dev/cu.", "nightcell boards", "--link socket",
                   "socket://127.0.0.1:", "CDC"):
        assert needed in text, needed


def test_check_procedure_marks_standards_with_the_commands():
    text = read("check_procedure.md")
    for command in ("nightcell dark", "nightcell blank", "nightcell standard", "nightcell opaque"):
        assert command in text, command
    assert "button press" not in text and "note the times" not in text
