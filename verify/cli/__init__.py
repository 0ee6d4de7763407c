"""The command line: one module per verb and the options they share."""
