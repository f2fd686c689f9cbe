//! Incremental CSV record splitting (see the module docs of `crate::ingest`).
