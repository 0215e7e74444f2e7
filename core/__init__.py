"""streamtab core: the domain — science, records, QC rules and the device store (no UI, no network)."""

__version__ = "0.1.0"
