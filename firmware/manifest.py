# Freeze or install the nightcell firmware with MicroPython's own tools (micropython-lib manifest format).
metadata(description="nightcell colorimeter logger firmware", version="0.1.0")

package("nightcell_fw")
package("boards", files=("__init__.py", "base.py", "choose.py", "pico.py", "esp32.py", "tsl2591.py", "probe.py",
                         "ports.py"))
module("main.py")
require("onewire")
require("ds18x20")
