//! Plain HTTP/1.1 over a std TcpStream for the examples that measure the server: one new
//! connection per request, as curl does, with nothing between the measurement and the socket.
// Each example includes this file and uses a part of it.
#![allow(dead_code)]

use std::io::{BufRead, BufReader, Read, Write};
use std::net::TcpStream;

/// Any failure, for examples.
pub type Error = Box<dyn std::error::Error>;

/// Sends one request and reads the whole response; returns (status, body).
pub fn request(
    addr: &str,
    method: &str,
    path: &str,
    headers: &[(&str, &str)],
    body: &[u8],
) -> Result<(u16, Vec<u8>), Error> {
    request_with_timeout(addr, method, path, headers, body, None)
}

/// [`request`] with a bound on connecting and on each read and write of the socket (`None`:
/// wait as long as it takes).
///
/// A server may answer before it has read the whole body (a 413 from `Content-Length`) and
/// close: as curl does, a failed write is not the end, the answer is still read, and only when
/// there is none (a reset, a timeout) is the write's failure returned.
pub fn request_with_timeout(
    addr: &str,
    method: &str,
    path: &str,
    headers: &[(&str, &str)],
    body: &[u8],
    timeout: Option<std::time::Duration>,
) -> Result<(u16, Vec<u8>), Error> {
    let mut s = match timeout {
        Some(t) => {
            let mut last = None;
            let mut found = None;
            for a in std::net::ToSocketAddrs::to_socket_addrs(addr)? {
                match TcpStream::connect_timeout(&a, t) {
                    Ok(s) => {
                        found = Some(s);
                        break;
                    }
                    Err(e) => last = Some(e),
                }
            }
            match (found, last) {
                (Some(s), _) => s,
                (None, Some(e)) => return Err(e.into()),
                (None, None) => return Err(format!("{addr} resolves to nothing").into()),
            }
        }
        None => TcpStream::connect(addr)?,
    };
    s.set_read_timeout(timeout)?;
    s.set_write_timeout(timeout)?;
    s.set_nodelay(true)?;
    let mut head = format!(
        "{method} {path} HTTP/1.1\r\nHost: {addr}\r\nConnection: close\r\nContent-Length: {}\r\n",
        body.len()
    );
    for (k, v) in headers {
        head.push_str(&format!("{k}: {v}\r\n"));
    }
    head.push_str("\r\n");
    let sent = s
        .write_all(head.as_bytes())
        .and_then(|()| s.write_all(body));
    let mut r = BufReader::new(s);
    let mut status_line = String::new();
    if let Err(read) = r.read_line(&mut status_line) {
        return Err(match sent {
            Err(write) => format!("sending: {write}; then no answer: {read}").into(),
            Ok(()) => read.into(),
        });
    }
    if status_line.is_empty()
        && let Err(write) = sent
    {
        return Err(format!("sending: {write}; then the connection closed unanswered").into());
    }
    let status: u16 = status_line
        .split_whitespace()
        .nth(1)
        .and_then(|c| c.parse().ok())
        .ok_or("bad status line")?;
    let mut len: Option<usize> = None;
    loop {
        let mut line = String::new();
        r.read_line(&mut line)?;
        if line == "\r\n" || line.is_empty() {
            break;
        }
        if let Some((k, v)) = line.split_once(':')
            && k.eq_ignore_ascii_case("content-length")
        {
            len = v.trim().parse().ok();
        }
    }
    let mut out = Vec::new();
    match len {
        Some(n) => {
            out.resize(n, 0);
            r.read_exact(&mut out)?;
        }
        None => {
            r.read_to_end(&mut out)?;
        }
    }
    Ok((status, out))
}

/// A JSON request with a bearer token; the body text, or an error for a status of 300 or more.
pub fn json(
    addr: &str,
    token: &str,
    method: &str,
    path: &str,
    body: &str,
) -> Result<String, Error> {
    let auth = format!("Bearer {token}");
    let (st, out) = request(
        addr,
        method,
        path,
        &[
            ("Authorization", &auth),
            ("Content-Type", "application/json"),
        ],
        body.as_bytes(),
    )?;
    let text = String::from_utf8(out)?;
    if st >= 300 {
        return Err(format!("{method} {path}: {st} {text}").into());
    }
    Ok(text)
}

/// A string field of a JSON document.
pub fn field(doc: &str, name: &str) -> Result<String, Error> {
    let v: serde_json::Value = serde_json::from_str(doc)?;
    Ok(v[name].as_str().ok_or("missing id")?.to_string())
}

/// `target/release/goalsmith serve` on a free port and a fresh SQLite database, with an editor
/// token; the server is killed when this is dropped.
pub struct Served {
    /// `HOST:PORT`.
    pub addr: String,
    /// An editor token of the team `bench`.
    pub token: String,
    child: std::process::Child,
    _dir: tempfile::TempDir,
}

impl Served {
    /// Starts the release binary (build it first).
    pub fn start() -> Result<Served, Error> {
        use std::process::{Command, Stdio};
        let bin = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("target/release/goalsmith");
        if !bin.exists() {
            return Err("build the server first: cargo build --release".into());
        }
        let dir = tempfile::tempdir()?;
        let db = format!("sqlite://{}", dir.path().join("bench.db").display());
        let token = String::from_utf8(
            Command::new(&bin)
                .args(["token", "create", "--team", "bench", "--role", "editor"])
                .args(["--database", &db])
                .output()?
                .stdout,
        )?
        .trim()
        .to_string();
        let mut child = Command::new(&bin)
            .args(["serve", "--bind", "127.0.0.1:0", "--database", &db])
            .env("GOALSMITH_LOG", "error")
            .stdout(Stdio::piped())
            .stderr(Stdio::null())
            .spawn()?;
        let mut line = String::new();
        BufReader::new(child.stdout.take().ok_or("no stdout")?).read_line(&mut line)?;
        let addr = line
            .trim()
            .strip_prefix("listening on http://")
            .ok_or("no listening line")?
            .to_string();
        Ok(Served {
            addr,
            token,
            child,
            _dir: dir,
        })
    }

    /// The server's process id.
    pub fn pid(&self) -> u32 {
        self.child.id()
    }
}

impl Drop for Served {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}
