"""Analyses of a Crystal: neighbours, engineering numbers, sites, fit, slip.
Nothing here imports the renderer."""
