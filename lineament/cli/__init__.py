"""The ``lineament`` command: thin click commands over the Python API."""
