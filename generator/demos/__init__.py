"""Bundled demo models (invented scenarios), handed out by `kinetab init`."""
