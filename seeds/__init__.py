"""Seed library sources shipped with refdb: hand-written CIFs of published structures and demo scans."""
