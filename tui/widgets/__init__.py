"""Widgets of the bandwatch interface."""
