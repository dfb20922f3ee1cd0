"""Screens of the bandwatch interface."""
