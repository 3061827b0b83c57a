"""The archive: raw copies, quarantine, pre-QC store, versioned datasets, catalog."""
