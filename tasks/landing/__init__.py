"""The landing folder and the extract contract: manifests, file reading, column names, checksums."""
