"""Readers: files in, canonical tables and a ledger out. No analysis here."""
