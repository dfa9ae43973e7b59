"""The bench simulator: a sensor-level stand-in for vehicle, rider, road and air.

From a physics simulation with known parameters (the shared core in
:mod:`livecoach.physics`) it produces the bytes and lines the real sensors
would send, as :class:`livecoach.stream.events.RawEvent` objects on a
simulated monotonic clock, with a truth log beside them.

Entry points: :func:`sim.run.simulate`, :func:`sim.run.iter_events`,
:func:`sim.scenario.load_scenario`, :func:`sim.bench.run_bench`,
:func:`sim.realtime.run_realtime`.
"""
