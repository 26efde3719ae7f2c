//! The store: one SQLite database per station, append-only records, raw captures by hash.
