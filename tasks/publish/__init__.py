"""Publishing: the snapshot switched in one transaction, the readers' copy and its contract, exports."""
