"""Radio telemetry to the chase vehicle: a compact binary frame of our own
layout, COBS-framed with a CRC-16, sent at 1-2 Hz over a serial radio modem.

Modules: :mod:`.cobs` (byte stuffing), :mod:`.crc16` (CRC-16/CCITT-FALSE),
:mod:`.frame` (the frame layout, pure), :mod:`.reader` (stream deframer with
loss and corruption counters, pure), :mod:`.sender` (the radio sink,
pyserial) and :mod:`.ground` (the ground station behind ``livecoach ground``).
This package's ``__init__`` stays light: the ride-file loader imports
:mod:`.config` before anything else.

Radio use: the modem's frequency band, transmit power and duty cycle must
follow the local radio rules and any licence they require; the event's rules
may restrict radios further.
"""
