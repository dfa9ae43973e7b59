"""livecoach: on-board ride computer for human-powered speed vehicles.

Functional core (physics, codecs, estimator, rider model, planner, coach) and a
thin imperative shell (sources, sinks, CLI) around one event stream.
"""

__version__ = "0.2.0"
