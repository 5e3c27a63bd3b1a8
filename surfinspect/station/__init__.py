"""Running parts: the per-part runner shared by inspect and demo, batches in a process pool, the
demo scenario, the line station (folder watcher, journal, OPC UA server). Imports every room below it.
"""

from .._lazy import attach

__getattr__, __dir__, __all__ = attach(
    __name__,
    {
        "runner": ("PartOutcome", "output_stems", "inspect_path", "find_images", "run_exit_code", "write_part_report"),
        "batch": (
            "BatchConfig",
            "BatchOutcome",
            "PartDone",
            "TEST_EXIT_AT_PART_ENV",
            "TEST_HOLD_FROM_PART_ENV",
            "discover_images",
            "run_batch",
            "open_batch",
            "archive_inspected",
            "batch_exit_code",
            "regions_csv",
            "render_batch_report",
            "export_batch",
        ),
        "retry": ("RetryOutcome", "retry_errors"),
        "demo": ("DEMO_PARTS", "make_demo_parts", "plate_on_fixture"),
        "watch": ("WatchConfig", "JudgedPart", "StationStatus", "WatchOutcome", "Station"),
    },
)
