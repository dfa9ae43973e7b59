"""The one event stream: raw events in (from any source), outputs out."""
