"""Bytes to records: message and file-format decoding into baskets or dead letters."""
