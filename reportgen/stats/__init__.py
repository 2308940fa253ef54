"""Pure numeric core: numpy and scipy only, no I/O, no pandas, jinja2 or matplotlib."""
