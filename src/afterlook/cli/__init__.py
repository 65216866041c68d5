"""Command line interface of afterlook."""
