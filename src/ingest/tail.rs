//! The directory tailer (see the module docs of `crate::ingest`).
