//! The client side of RELP, the Reliable Event Logging Protocol (as specified with librelp and
//! implemented by rsyslog's `imrelp`): every message is a numbered transaction that the
//! collector answers with `rsp 200` once it has taken the message, so an event leaves the queue
//! only when the collector itself says it has it — not when the collector's kernel has buffered
//! it, which is all plain TCP can tell.
//!
//! A frame is `TXNR SP COMMAND SP DATALEN [SP DATA] LF`; the session opens with `open` (offers:
//! `relp_version=0`, `commands=syslog`), sends `syslog` frames, and ends with `close`. The
//! collector may send `serverclose` at any time. Transaction numbers run 1..=999_999_999 and
//! wrap to 1.

use std::io::{self, Read, Write};
use std::net::TcpStream;
use std::time::{Duration, Instant};

/// Highest transaction number before it wraps to 1.
const TXNR_MAX: u64 = 999_999_999;

/// The largest response frame accepted (a collector's `rsp` carries a short text, the `open`
/// response its offers).
const MAX_RESPONSE_BYTES: usize = 64 * 1024;

/// One RELP frame.
pub(super) fn frame(txnr: u64, command: &str, data: &[u8]) -> Vec<u8> {
    let mut out = format!("{txnr} {command} {}", data.len()).into_bytes();
    if !data.is_empty() {
        out.push(b' ');
        out.extend_from_slice(data);
    }
    out.push(b'\n');
    out
}

/// A parsed frame from the collector.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(super) struct Frame {
    /// Transaction number (0 for unsolicited `serverclose`).
    pub txnr: u64,
    /// `rsp` or `serverclose`.
    pub command: String,
    /// The data (for `rsp`: a status code, a space, a text, then optional offer lines).
    pub data: Vec<u8>,
}

/// Parse one complete frame at the start of `buf`: the frame and the bytes it took, `Ok(None)`
/// when more bytes are needed, or an error for a malformed frame.
pub(super) fn parse(buf: &[u8]) -> Result<Option<(Frame, usize)>, String> {
    let mut fields = Vec::with_capacity(3);
    let mut pos = 0;
    while fields.len() < 3 {
        let Some(sp) = buf[pos..].iter().position(|b| *b == b' ' || *b == b'\n') else {
            return if buf.len() - pos > 32 {
                Err("a RELP header field is too long".into())
            } else {
                Ok(None)
            };
        };
        fields.push(&buf[pos..pos + sp]);
        pos += sp;
        if fields.len() < 3 {
            if buf[pos] != b' ' {
                return Err("a RELP frame header ends early".into());
            }
            pos += 1;
        }
    }
    let text = |f: &[u8]| String::from_utf8_lossy(f).into_owned();
    let num = |f: &[u8], what: &str| {
        text(f).parse::<u64>().map_err(|_| format!("the RELP {what} `{}` is not a number", text(f)))
    };
    let txnr = num(fields[0], "transaction number")?;
    let command = text(fields[1]);
    let len = usize::try_from(num(fields[2], "data length")?).unwrap_or(usize::MAX);
    if len > MAX_RESPONSE_BYTES {
        return Err(format!("a RELP response of {len} bytes is larger than {MAX_RESPONSE_BYTES}"));
    }
    // After the length: LF when there is no data, else SP, the data and LF.
    let data_start = if len == 0 { pos } else { pos + 1 };
    let end = data_start + len;
    if buf.len() <= end {
        return Ok(None);
    }
    if len > 0 && buf[pos] != b' ' {
        return Err("no space between the RELP data length and the data".into());
    }
    if buf[end] != b'\n' {
        return Err("a RELP frame does not end with a line feed".into());
    }
    Ok(Some((Frame { txnr, command, data: buf[data_start..end].to_vec() }, end + 1)))
}

/// The status code of an `rsp` frame's data (`200 OK` → 200).
pub(super) fn status(data: &[u8]) -> Option<u16> {
    let head: Vec<u8> = data.iter().copied().take_while(u8::is_ascii_digit).collect();
    String::from_utf8(head).ok()?.parse().ok()
}

/// An open RELP session over TCP.
pub(super) struct Session {
    stream: TcpStream,
    next_txnr: u64,
    /// Bytes read but not yet parsed.
    pending: Vec<u8>,
    /// How long to wait for the collector's answer to one transaction.
    ack_timeout: Duration,
}

impl Session {
    /// Open a session on a connected stream: the `open` transaction must be answered `200`.
    pub(super) fn open(stream: TcpStream, ack_timeout: Duration) -> io::Result<Session> {
        let mut s = Session { stream, next_txnr: 1, pending: Vec::new(), ack_timeout };
        let offers =
            format!("relp_version=0\nrelp_software=efftemp,{}\ncommands=syslog", env!("CARGO_PKG_VERSION"));
        s.transact("open", offers.as_bytes())?;
        Ok(s)
    }

    /// Send `syslog` with `msg` and wait for the collector's `200`.
    pub(super) fn send(&mut self, msg: &[u8]) -> io::Result<()> {
        self.transact("syslog", msg)
    }

    /// One transaction: write the frame, read until its response; anything but `200` (or no
    /// answer within the timeout: a hung collector) is an error and the message stays queued.
    fn transact(&mut self, command: &str, data: &[u8]) -> io::Result<()> {
        let txnr = self.next_txnr;
        self.next_txnr = if txnr >= TXNR_MAX { 1 } else { txnr + 1 };
        self.stream.write_all(&frame(txnr, command, data))?;
        let deadline = Instant::now() + self.ack_timeout;
        loop {
            match parse(&self.pending).map_err(|e| io::Error::new(io::ErrorKind::InvalidData, e))? {
                Some((f, used)) => {
                    self.pending.drain(..used);
                    if f.command == "serverclose" {
                        return Err(io::Error::new(
                            io::ErrorKind::ConnectionAborted,
                            "the collector closed the session",
                        ));
                    }
                    if f.command != "rsp" || f.txnr != txnr {
                        continue; // not the answer to this transaction
                    }
                    return match status(&f.data) {
                        Some(200) => Ok(()),
                        _ => Err(io::Error::other(format!(
                            "the collector refused `{command}`: {}",
                            String::from_utf8_lossy(&f.data).lines().next().unwrap_or("")
                        ))),
                    };
                }
                None => {
                    let left = deadline.saturating_duration_since(Instant::now());
                    if left.is_zero() {
                        return Err(io::Error::new(
                            io::ErrorKind::TimedOut,
                            format!(
                                "the collector did not acknowledge within {} ms (hung, or not a RELP listener)",
                                self.ack_timeout.as_millis()
                            ),
                        ));
                    }
                    self.stream.set_read_timeout(Some(left))?;
                    let mut buf = [0u8; 4096];
                    match self.stream.read(&mut buf) {
                        Ok(0) => {
                            return Err(io::Error::new(
                                io::ErrorKind::UnexpectedEof,
                                "the collector closed the connection",
                            ));
                        }
                        Ok(n) => self.pending.extend_from_slice(&buf[..n]),
                        Err(e) if matches!(e.kind(), io::ErrorKind::WouldBlock | io::ErrorKind::TimedOut) => {
                        }
                        Err(e) if e.kind() == io::ErrorKind::Interrupted => {}
                        Err(e) => return Err(e),
                    }
                }
            }
        }
    }

    /// Whether the session still looks usable between transactions: anything readable is a
    /// `serverclose`, the end of the stream or an error.
    pub(super) fn check(&mut self) -> io::Result<()> {
        self.stream.set_nonblocking(true)?;
        let mut buf = [0u8; 512];
        let r = match self.stream.read(&mut buf) {
            Ok(0) => Err(io::Error::new(io::ErrorKind::UnexpectedEof, "the collector closed the connection")),
            Ok(_) => Err(io::Error::new(io::ErrorKind::ConnectionAborted, "the collector ended the session")),
            Err(e) if e.kind() == io::ErrorKind::WouldBlock => Ok(()),
            Err(e) => Err(e),
        };
        self.stream.set_nonblocking(false)?;
        r
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    /// Frames as the librelp documentation writes them: `1 open 85 relp_version=0…`,
    /// `2 syslog 12 <13>message`, `3 close 0`.
    #[test]
    fn frames_and_responses() {
        assert_eq!(frame(2, "syslog", b"<13>message"), b"2 syslog 11 <13>message\n");
        assert_eq!(frame(3, "close", b""), b"3 close 0\n");
        let (f, used) = parse(b"2 rsp 6 200 OK\n7 rsp").unwrap().unwrap();
        assert_eq!((f.txnr, f.command.as_str(), f.data.as_slice(), used), (2, "rsp", &b"200 OK"[..], 15));
        assert_eq!(status(&f.data), Some(200));
        let (f, _) = parse(b"0 serverclose 0\n").unwrap().unwrap();
        assert_eq!((f.txnr, f.command.as_str(), f.data.len()), (0, "serverclose", 0));
        // Incomplete: more bytes needed, at every cut.
        let whole = b"12 rsp 9 500 error\n";
        for cut in 0..whole.len() {
            assert_eq!(parse(&whole[..cut]).unwrap(), None, "cut at {cut}");
        }
        assert_eq!(status(&parse(whole).unwrap().unwrap().0.data), Some(500));
        for bad in [&b"x rsp 6 200 OK\n"[..], b"1 rsp 6 200 OK?", b"1 rsp 9999999 ", b"1 rsp 2x \n"] {
            assert!(parse(bad).is_err(), "{}", String::from_utf8_lossy(bad));
        }
    }
}
