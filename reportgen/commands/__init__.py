"""One module per command; each exposes ``command``.  Import only click at top level."""
