"""Screens of the workbench, one per file."""
