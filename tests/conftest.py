"""Shared test set-up: draw figures off screen."""

import matplotlib

matplotlib.use("Agg")
