"""Checks of a design against its ``spec`` section (``spec``), stability first."""
