"""One module per command of the command line: arguments in, one call, text or JSON out."""
