//! Model-based tests of the directory tailer (see src/ingest/tail.rs).
