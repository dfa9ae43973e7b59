"""Sinks: where LiveState and notices go (display, audio, web page, radio, recording).

Each sink has ``on_state(state)`` and ``on_notice(notice)`` that return at once,
plus optional ``async start()`` / ``async stop()``.
"""
