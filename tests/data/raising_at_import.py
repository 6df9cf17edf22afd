"""A user module whose import fails: loading any attribute of it must be a one-line usage error."""

raise RuntimeError("deliberate failure while importing")
