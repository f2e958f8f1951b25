"""The six pages of the window, one module each."""
