"""afterlook."""
