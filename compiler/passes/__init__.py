"""Passes that transform the IR or derive forms of it for the back-ends."""
