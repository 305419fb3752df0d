"""Campaign files, search, tolerance analysis, results and the ``tunnelsmith`` command."""
