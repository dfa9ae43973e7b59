"""Pure codecs for sensor payloads (no I/O): Bluetooth SIG GATT measurements,
NMEA 0183 GPS sentences and the livecoach sensor line protocol (lsl1).

Every decoder raises :class:`livecoach.errors.DecodeError` with a reason;
every encoder raises :class:`livecoach.errors.EncodeError` for values its
protocol cannot carry. Import the submodules directly:
``livecoach.codecs.cycling_power``, ``.csc``, ``.heart_rate``,
``.revolutions``, ``.mcu_line``, ``.nmea``.
"""
