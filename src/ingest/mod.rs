//! Ingestion: from historian export files to samples.
//!
//! * [`split`]: an incremental CSV record splitter over bytes (csv-core), which never emits a
//!   partial record and bounds the memory of an over-long one.
//! * [`tail`]: the directory tailer: file identity by content fingerprint, checkpoints at record
//!   boundaries, rotation, truncation, replacement and deletion.
//! * [`rows`]: records to samples (layouts, timestamps, quality words, rejections).
//! * [`repeat`]: repeated warnings limited per file and reason (first in full, then a count).
//! * [`watch`]: file-system events as wake-up hints.

pub mod glob;
pub mod reader;
pub mod repeat;
pub mod rows;
pub mod settings;
pub mod split;
pub mod tail;
pub mod watch;
