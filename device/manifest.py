"""MicroPython manifest: freeze the timer's firmware into a MicroPython build.

``engine/`` (all of it) and the firmware core of ``device/`` (``FIRMWARE`` below) become
bytecode in flash, where it takes no heap; the almanac years, the board profile, the log and
the pushed files stay files.  Build MicroPython with it, then install the rest with
``limbclock board install --code frozen`` (DEVELOPERS.md, "Boards")::

    make -C ports/rp2 BOARD=RPI_PICO FROZEN_MANIFEST=/path/to/limbclock/device/manifest.py
    make -C ports/esp32 BOARD=ESP32_GENERIC FROZEN_MANIFEST=/path/to/limbclock/device/manifest.py

``limbclock board build`` reads this file too (``host/cmd_board.py``): the ``.mpy`` tree
holds exactly the modules frozen here.  A new file in ``device/`` must be listed in
``FIRMWARE`` or ``HOST_ONLY`` (a test checks).
"""
FIRMWARE = ("__init__.py", "board.py", "button.py", "clock.py", "display.py", "firmware.py", "frame.py",
            "hal.py", "log.py", "main.py", "nmea.py", "onboard.py", "protocol.py", "screens.py")
# CPython only (the virtual timer and its MicroPython shim's CPython side), the shim's MicroPython
# side (the `sim` profile adds it to its own tree) and this manifest.
HOST_ONLY = ("sim.py", "simhw.py", "mpsim.py", "simboard.py", "manifest.py")

include("$(PORT_DIR)/boards/manifest.py")              # noqa: F821 - the port's own frozen modules
package("engine", base_path="..")                        # noqa: F821
package("device", files=FIRMWARE, base_path="..")        # noqa: F821
