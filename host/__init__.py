"""limbclock host tool: command line, serial client, archive, plots, exports, fitter."""
