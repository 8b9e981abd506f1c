"""Dialogs: shape builder, material, sweep."""
