//! The contract's error body on the answers hyper writes by itself.
//!
//! A request whose head cannot be parsed never reaches the router: hyper answers it directly
//! (400 for a malformed request line or header, 414 for a URI over its 64 KiB limit, 431 for a
//! head larger than its read buffer) with an empty body, and closes the connection. Those
//! answers would be the only error responses without the contract's JSON body, so each
//! connection's writes pass through [`ContractIo`], which replaces exactly such a head (an
//! error status with no header but `connection: close`, `content-length: 0` and `date`) with the same status, the
//! contract's body and the headers every response carries. Everything else passes through
//! untouched, in the same writes.

use std::io;
use std::pin::Pin;
use std::task::{Context, Poll};
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::net::{TcpListener, TcpStream};

/// The statuses hyper writes on its own for a request it cannot parse, with the contract's
/// error code and message for each.
const PARSE_ERRORS: &[(&[u8], &str, &str, &str)] = &[
    (
        b"400",
        "Bad Request",
        "bad_request",
        "the request is not valid HTTP/1.1 (its request line or a header could not be read)",
    ),
    (
        b"414",
        "URI Too Long",
        "uri_too_long",
        "the request's URI is longer than the server reads (64 KiB); keep ids and query \
         parameters in the URI and send data in the request body",
    ),
    (
        b"431",
        "Request Header Fields Too Large",
        "headers_too_large",
        "the request's head (request line and headers) is larger than the server reads \
         (about 400 KiB); send fewer or shorter headers",
    ),
];

/// Accepts TCP connections whose writes go through [`ContractIo`].
pub struct ContractListener {
    inner: TcpListener,
    headers: &'static [(&'static str, &'static str)],
}

impl ContractListener {
    /// `headers` go on every replaced answer (the ones the router adds to all responses).
    pub fn new(inner: TcpListener, headers: &'static [(&'static str, &'static str)]) -> Self {
        Self { inner, headers }
    }
}

impl axum::serve::Listener for ContractListener {
    type Io = ContractIo<TcpStream>;
    type Addr = std::net::SocketAddr;

    async fn accept(&mut self) -> (Self::Io, Self::Addr) {
        let (stream, addr) = axum::serve::Listener::accept(&mut self.inner).await;
        (ContractIo::new(stream, self.headers), addr)
    }

    fn local_addr(&self) -> io::Result<Self::Addr> {
        self.inner.local_addr()
    }
}

/// A connection whose writes of a bodiless error head (see the module's text) are replaced by
/// the contract's answer; reads and all other writes pass through.
pub struct ContractIo<S> {
    inner: S,
    headers: &'static [(&'static str, &'static str)],
    /// A replacement being written, how much of it is out, and how many of the caller's bytes
    /// it stands for.
    pending: Option<(Vec<u8>, usize, usize)>,
}

impl<S> ContractIo<S> {
    /// Wraps `inner`.
    pub fn new(inner: S, headers: &'static [(&'static str, &'static str)]) -> Self {
        Self {
            inner,
            headers,
            pending: None,
        }
    }

    /// The wrapped connection.
    pub fn get_ref(&self) -> &S {
        &self.inner
    }
}

/// The replacement for `buf` when it starts with a bodiless error head of [`PARSE_ERRORS`], and
/// the length of that head.
pub fn replacement(buf: &[u8], headers: &[(&str, &str)]) -> Option<(Vec<u8>, usize)> {
    let rest = buf
        .strip_prefix(b"HTTP/1.1 ")
        .or_else(|| buf.strip_prefix(b"HTTP/1.0 "))?;
    let (status, reason, code, message) = PARSE_ERRORS
        .iter()
        .find(|(s, ..)| rest.starts_with(s) && rest.get(3) == Some(&b' '))?;
    let end = buf.windows(4).position(|w| w == b"\r\n\r\n")? + 4;
    let head = String::from_utf8_lossy(&buf[..end]).to_ascii_lowercase();
    let lines: Vec<&str> = head.split("\r\n").collect();
    // Exactly hyper's automatic answer: no header but the zero length, the close and the date.
    let only_hypers = lines[1..].iter().all(|l| {
        l.is_empty()
            || *l == "content-length: 0"
            || *l == "connection: close"
            || l.starts_with("date:")
    });
    if !lines.contains(&"content-length: 0") || !only_hypers {
        return None;
    }
    let id = uuid::Uuid::new_v4().to_string();
    let body = serde_json::json!({
        "error": {"code": code, "message": message, "request_id": id}
    })
    .to_string();
    let mut out = format!(
        "HTTP/1.1 {} {reason}\r\ncontent-type: application/json\r\ncontent-length: {}\r\n\
         connection: close\r\nx-request-id: {id}\r\n",
        String::from_utf8_lossy(status),
        body.len()
    );
    for (name, value) in headers {
        out.push_str(&format!("{name}: {value}\r\n"));
    }
    // hyper's own date line, when it wrote one.
    if let Some(date) = lines.iter().position(|l| l.starts_with("date:")) {
        let original = String::from_utf8_lossy(&buf[..end]);
        if let Some(line) = original.split("\r\n").nth(date) {
            out.push_str(line);
            out.push_str("\r\n");
        }
    }
    out.push_str("\r\n");
    out.push_str(&body);
    Some((out.into_bytes(), end))
}

impl<S: AsyncWrite + Unpin> ContractIo<S> {
    /// Writes the pending replacement out; when all of it is, the caller's bytes it stands for.
    fn drive(&mut self, cx: &mut Context<'_>) -> Poll<io::Result<usize>> {
        while let Some((bytes, written, _)) = self.pending.as_mut() {
            if *written == bytes.len() {
                break;
            }
            match Pin::new(&mut self.inner).poll_write(cx, &bytes[*written..]) {
                Poll::Ready(Ok(0)) => return Poll::Ready(Err(io::ErrorKind::WriteZero.into())),
                Poll::Ready(Ok(n)) => *written += n,
                Poll::Ready(Err(e)) => return Poll::Ready(Err(e)),
                Poll::Pending => return Poll::Pending,
            }
        }
        let claimed = self.pending.take().map_or(0, |(_, _, c)| c);
        Poll::Ready(Ok(claimed))
    }
}

impl<S: AsyncRead + Unpin> AsyncRead for ContractIo<S> {
    fn poll_read(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_read(cx, buf)
    }
}

impl<S: AsyncWrite + Unpin> AsyncWrite for ContractIo<S> {
    fn poll_write(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<io::Result<usize>> {
        if self.pending.is_none() {
            match replacement(buf, self.headers) {
                Some((bytes, claimed)) => self.pending = Some((bytes, 0, claimed)),
                None => return Pin::new(&mut self.inner).poll_write(cx, buf),
            }
        }
        self.drive(cx)
    }

    fn poll_write_vectored(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        bufs: &[io::IoSlice<'_>],
    ) -> Poll<io::Result<usize>> {
        if self.pending.is_none() {
            // A head is the first thing in a write; empty slices before it count for nothing.
            let first = bufs
                .iter()
                .find(|b| !b.is_empty())
                .map_or(&[][..], |b| &b[..]);
            match replacement(first, self.headers) {
                Some((bytes, claimed)) => self.pending = Some((bytes, 0, claimed)),
                None => return Pin::new(&mut self.inner).poll_write_vectored(cx, bufs),
            }
        }
        self.drive(cx)
    }

    fn is_write_vectored(&self) -> bool {
        self.inner.is_write_vectored()
    }

    fn poll_flush(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_flush(cx)
    }

    fn poll_shutdown(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_shutdown(cx)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const HEADERS: &[(&str, &str)] = &[("x-content-type-options", "nosniff")];

    #[test]
    fn a_bodiless_parse_error_head_gets_the_contract_body() {
        // As hyper 1 writes it.
        let head = b"HTTP/1.1 414 URI Too Long\r\nconnection: close\r\ncontent-length: 0\r\ndate: Fri, 04 Dec 2026 02:00:00 GMT\r\n\r\n";
        let (out, claimed) = replacement(head, HEADERS).expect("replaced");
        assert_eq!(claimed, head.len());
        let text = String::from_utf8(out).expect("utf8");
        let (h, body) = text.split_once("\r\n\r\n").expect("head and body");
        assert!(h.starts_with("HTTP/1.1 414 URI Too Long\r\n"), "{h}");
        assert!(h.contains("content-type: application/json"));
        assert!(h.contains("x-content-type-options: nosniff"));
        assert!(h.contains("connection: close"));
        assert!(h.contains("date: Fri, 04 Dec 2026 02:00:00 GMT"));
        assert!(h.contains(&format!("content-length: {}", body.len())));
        let v: serde_json::Value = serde_json::from_str(body).expect("json body");
        assert_eq!(v["error"]["code"], "uri_too_long");
        assert!(v["error"]["request_id"].is_string());
    }

    #[test]
    fn other_answers_pass_untouched() {
        for head in [
            // A body, a type or any other header: the router's own answers.
            &b"HTTP/1.1 400 Bad Request\r\ncontent-type: application/json\r\ncontent-length: 0\r\n\r\n"[..],
            b"HTTP/1.1 414 URI Too Long\r\ncontent-length: 12\r\n\r\n",
            b"HTTP/1.1 400 Bad Request\r\ncontent-length: 0\r\nx-request-id: 1\r\n\r\n",
            // Not an error hyper writes by itself.
            b"HTTP/1.1 404 Not Found\r\ncontent-length: 0\r\n\r\n",
            b"HTTP/1.1 200 OK\r\ncontent-length: 0\r\n\r\n",
            // A status that only starts like one.
            b"HTTP/1.1 4000 Odd\r\ncontent-length: 0\r\n\r\n",
            // An incomplete head, and body bytes that look like a head.
            b"HTTP/1.1 400 Bad Request\r\ncontent-length: 0\r\n",
            b"{\"HTTP/1.1 400 \"}",
        ] {
            assert!(
                replacement(head, HEADERS).is_none(),
                "{}",
                String::from_utf8_lossy(head)
            );
        }
    }
}
