"""Floor 6, the commands: one module per ``tunnelsmith`` sub-command, plus shared outputs."""
