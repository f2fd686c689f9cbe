//! The syslog sink: each new alert event into the forwarder's disk queue.

use std::io;
use std::sync::Arc;

use super::Forwarder;
use crate::core::Outcome;
use crate::sinks::Sink;
use crate::sinks::durable::SyncSet;

/// Alert events to the syslog forwarder's disk queue, each once: events already in the alert
/// log when the service started are not sent again.
pub struct SyslogSink {
    forwarder: Arc<Forwarder>,
    /// Sequence number of the last event queued (or on disk at start).
    last_sequence: u64,
}

impl SyslogSink {
    /// Forward through `forwarder` the events after `last_sequence`.
    pub fn new(forwarder: Arc<Forwarder>, last_sequence: u64) -> SyslogSink {
        SyslogSink { forwarder, last_sequence }
    }
}

impl Sink for SyslogSink {
    fn write(&mut self, outcome: &Outcome) -> io::Result<()> {
        for event in &outcome.events {
            if event.sequence > self.last_sequence {
                self.forwarder.send(event);
                self.last_sequence = event.sequence;
            }
        }
        Ok(())
    }

    // The forwarder's queue is durable as it is written.
    fn flush(&mut self) -> io::Result<()> {
        Ok(())
    }

    fn sync_into(&mut self, _: &mut SyncSet) -> io::Result<()> {
        Ok(())
    }
}
