"""Running parts: the per-part runner shared by inspect and demo, batches in a process pool, the
demo scenario, the line station (folder watcher, journal, OPC UA server). Imports every room below it.
"""

from .._lazy import attach

__getattr__, __dir__ = attach(__name__, ("runner", "batch", "retry", "demo", "watch"))
