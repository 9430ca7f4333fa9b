"""Files the service serves itself (no public web address at run time)."""
