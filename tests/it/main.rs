//! The one integration-test binary. Modules share the helpers in `util`.
#![allow(clippy::unwrap_used, clippy::format_push_string, missing_docs, unreachable_pub, dead_code)]

#[path = "../shared/oracles.rs"]
mod oracles;
mod util;

mod cli;
mod demo;
mod docs;
mod forward;
mod handbook;
mod hostile;
mod ingest;
mod layout;
mod monitor;
mod physics;
mod reference;
mod report;
mod service;
mod site_commands;
mod tailer;
