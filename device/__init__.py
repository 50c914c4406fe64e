"""The timer's firmware core and the virtual timer.

Firmware core (imports under MicroPython): ``hal`` (hardware boundary and the
file store), ``nmea`` (RMC/ZDA time labels), ``clock`` (PPS discipline,
holdover, manual set), ``button`` (debounce and gestures), ``log`` (the
power-safe contact log), ``frame`` (the one frame codec, shared with the host),
``protocol`` (device-side commands), ``firmware`` (the main loop) and ``board``
(the ``machine`` boundary of a MicroPython board; imports anywhere), ``display``
and ``screens`` (the OLED and what it shows), ``main`` (start-up on a board).
CPython only: ``simhw`` (simulated hardware), ``sim`` (the virtual timer) and
``mpsim`` (the virtual timer with its firmware in MicroPython's unix port, whose
side of the shim is ``simboard``).  ``manifest.py`` freezes the firmware.
"""

FIRMWARE_VERSION = "0.1.0"
PROTOCOL_VERSION = 2
