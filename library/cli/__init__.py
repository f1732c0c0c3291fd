"""Command-line interface: thin commands over kinetome.library.api."""
