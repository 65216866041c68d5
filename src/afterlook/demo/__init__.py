"""The afterlook demo scenario (invented pump-station data, for the demo only)."""

from afterlook.demo.scenario import (
    FAILURE_KINDS,
    FEATURE_COLUMNS,
    STATIONS,
    DemoScenario,
    generate,
)

__all__ = ["DemoScenario", "FAILURE_KINDS", "FEATURE_COLUMNS", "STATIONS", "generate"]
