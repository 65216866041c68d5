"""Widgets of the workbench; each is told what to show by the App and posts messages up."""
