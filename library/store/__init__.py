"""Versioned skill store: SQLite index, sha256 content-addressed blobs, lineage, bundles."""
