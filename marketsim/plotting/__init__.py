"""Matplotlib figures. Each module draws one kind of result; import matplotlib lazily."""
