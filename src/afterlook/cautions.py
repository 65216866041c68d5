"""The safety caution shown in --help, the README and every report."""

CAUTION = (
    "Caution: pump, process and machine alarms can protect people and property. afterlook is an "
    "analysis aid: it does not replace protection devices, interlocks or site procedures, and a "
    "model change must go through the site's normal review. Defer to local codes and licensed practice."
)
