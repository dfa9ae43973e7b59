"""The live loop (imperative shell): sources -> queue -> pipeline -> sinks."""
