//! A small, strict RFC 5424 parser for the tests: it checks what our formatter promises
//! (header field sets and lengths, SD-ID and SD-NAME characters, escapes, the BOM) and gives
//! the fields back. Shared by the unit tests of `src/sinks/syslog/mod.rs` (through `#[path]`) and the
//! collector tests in `tests/it/forward.rs`.
#![allow(dead_code)]

/// One SD-ELEMENT.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Element {
    pub(crate) id: String,
    pub(crate) params: Vec<(String, String)>,
}

impl Element {
    /// The (unescaped) value of the first parameter with this name.
    pub(crate) fn get(&self, name: &str) -> Option<&str> {
        self.params.iter().find(|(k, _)| k == name).map(|(_, v)| v.as_str())
    }
}

/// A parsed message.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Parsed {
    pub(crate) pri: u16,
    pub(crate) timestamp: String,
    pub(crate) hostname: String,
    pub(crate) app_name: String,
    pub(crate) procid: String,
    pub(crate) msgid: String,
    pub(crate) sd: Vec<Element>,
    /// Whether MSG started with the UTF-8 BOM (which is not part of `msg`).
    pub(crate) bom: bool,
    pub(crate) msg: String,
}

impl Parsed {
    /// The element with this SD-ID.
    pub(crate) fn element(&self, id: &str) -> Option<&Element> {
        self.sd.iter().find(|e| e.id == id)
    }
}

fn printusascii(c: char) -> bool {
    ('!'..='~').contains(&c)
}

fn sd_name_char(c: char) -> bool {
    printusascii(c) && !matches!(c, '=' | ']' | '"')
}

struct Cursor<'a> {
    s: &'a str,
    i: usize,
}

impl<'a> Cursor<'a> {
    fn peek(&self) -> Option<char> {
        self.s[self.i..].chars().next()
    }
    fn bump(&mut self) -> Option<char> {
        let c = self.peek()?;
        self.i += c.len_utf8();
        Some(c)
    }
    fn expect(&mut self, c: char) -> Result<(), String> {
        match self.bump() {
            Some(x) if x == c => Ok(()),
            other => Err(format!("expected {c:?} at byte {}, found {other:?}", self.i)),
        }
    }
    /// A header field: 1..=max PRINTUSASCII, then SP.
    fn field(&mut self, what: &str, max: usize) -> Result<&'a str, String> {
        let start = self.i;
        while self.peek().is_some_and(printusascii) {
            self.bump();
        }
        let f = &self.s[start..self.i];
        if f.is_empty() || f.len() > max {
            return Err(format!("{what} `{f}` must be 1..={max} printable characters"));
        }
        self.expect(' ')?;
        Ok(f)
    }
    fn name(&mut self, what: &str) -> Result<String, String> {
        let start = self.i;
        while self.peek().is_some_and(sd_name_char) {
            self.bump();
        }
        let n = &self.s[start..self.i];
        if n.is_empty() || n.len() > 32 {
            return Err(format!("{what} `{n}` must be 1..=32 SD-NAME characters"));
        }
        Ok(n.to_string())
    }
}

/// Parse one message (without transport framing).
pub(crate) fn parse(text: &str) -> Result<Parsed, String> {
    let mut c = Cursor { s: text, i: 0 };
    c.expect('<')?;
    let start = c.i;
    while c.peek().is_some_and(|x| x.is_ascii_digit()) {
        c.bump();
    }
    let digits = &text[start..c.i];
    if digits.is_empty() || digits.len() > 3 {
        return Err(format!("PRI `{digits}` must be 1..=3 digits"));
    }
    let pri: u16 = digits.parse().map_err(|e| format!("PRI: {e}"))?;
    if pri > 191 {
        return Err(format!("PRI {pri} > 191"));
    }
    c.expect('>')?;
    c.expect('1')?;
    c.expect(' ')?;
    let timestamp = c.field("TIMESTAMP", 64)?.to_string();
    if timestamp != "-" {
        let ts: jiff::Timestamp = timestamp.parse().map_err(|e| format!("TIMESTAMP `{timestamp}`: {e}"))?;
        let _ = ts;
        let frac = timestamp.split_once('.').map(|(_, f)| f.chars().take_while(char::is_ascii_digit).count());
        if frac.is_some_and(|n| n == 0 || n > 6) {
            return Err(format!("TIMESTAMP `{timestamp}`: TIME-SECFRAC must have 1..=6 digits"));
        }
        if !timestamp.contains('T') || timestamp.len() < 20 {
            return Err(format!("TIMESTAMP `{timestamp}` is not FULL-DATE \"T\" FULL-TIME"));
        }
    }
    let hostname = c.field("HOSTNAME", 255)?.to_string();
    let app_name = c.field("APP-NAME", 48)?.to_string();
    let procid = c.field("PROCID", 128)?.to_string();
    let msgid = c.field("MSGID", 32)?.to_string();
    let mut sd = Vec::new();
    if c.peek() == Some('-') {
        c.bump();
    } else {
        while c.peek() == Some('[') {
            c.bump();
            let id = c.name("SD-ID")?;
            if sd.iter().any(|e: &Element| e.id == id) {
                return Err(format!("SD-ID `{id}` appears twice"));
            }
            let mut params = Vec::new();
            while c.peek() == Some(' ') {
                c.bump();
                let name = c.name("PARAM-NAME")?;
                c.expect('=')?;
                c.expect('"')?;
                let mut value = String::new();
                loop {
                    match c.bump() {
                        None => return Err(format!("unterminated value of `{name}`")),
                        Some('"') => break,
                        Some(']') => return Err(format!("unescaped `]` in the value of `{name}`")),
                        Some('\\') => match c.peek() {
                            Some(x @ ('"' | '\\' | ']')) => {
                                c.bump();
                                value.push(x);
                            }
                            _ => value.push('\\'),
                        },
                        Some(x) => value.push(x),
                    }
                }
                params.push((name, value));
            }
            c.expect(']')?;
            sd.push(Element { id, params });
        }
        if sd.is_empty() {
            return Err("STRUCTURED-DATA is neither `-` nor an element".into());
        }
    }
    let (bom, msg) = match c.peek() {
        None => (false, String::new()),
        Some(' ') => {
            c.bump();
            let rest = &text[c.i..];
            match rest.strip_prefix('\u{feff}') {
                Some(m) => (true, m.to_string()),
                None => (false, rest.to_string()),
            }
        }
        Some(x) => return Err(format!("expected SP before MSG, found {x:?}")),
    };
    Ok(Parsed { pri, timestamp, hostname, app_name, procid, msgid, sd, bom, msg })
}
