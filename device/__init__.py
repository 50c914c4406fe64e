"""The timer's firmware core and the virtual timer.

Firmware core (imports under MicroPython): ``hal`` (hardware boundary and the
file store), ``nmea`` (RMC/ZDA time labels), ``clock`` (PPS discipline,
holdover, manual set), ``button`` (debounce and gestures), ``log`` (the
power-safe contact log), ``frame`` (the one frame codec, shared with the host),
``protocol`` (device-side commands), ``firmware`` (the main loop) and ``board``
(the ``machine`` boundary of a MicroPython board; imports anywhere).
CPython only: ``simhw`` (simulated hardware) and ``sim`` (the virtual timer).
"""

FIRMWARE_VERSION = "0.1.0"
PROTOCOL_VERSION = 2
