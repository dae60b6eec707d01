//! What the pages need to defend the sign-in: the throttles, the bound on password hashes running
//! at once, the key that signs pre-session form tokens, and the base of the links we hand out.
//!
//! The form key is shared through the database (`server_secrets`), so a sign-in form served by
//! one process can be posted to another behind a load balancer. The throttle counts and the
//! hashing slots live in this process's memory: with several processes the limits hold per
//! process, so a guesser spread over N processes gets at most N times the allowance. That is
//! acceptable for the few processes a team runs, and is the thing to move into the database
//! when we run many.

/// Why a sign-in step was refused; the pages turn it into a page with the right status.
#[derive(Debug)]
pub enum SecurityError {
    /// Too many attempts (429), with the message for the person and when to come back.
    TooMany {
        /// For the person.
        message: String,
        /// Seconds until the next attempt is allowed.
        retry_after_s: u64,
    },
    /// Every hashing slot is taken (503).
    Busy {
        /// Seconds to wait before retrying.
        retry_after_s: u64,
    },
    /// Something that should not happen.
    Internal(String),
}

use crate::config::SignInLimits;
use axum::extract::{ConnectInfo, FromRequestParts};
use axum::http::{HeaderMap, request::Parts};
use sha2::{Digest, Sha256};
use std::collections::{HashMap, VecDeque};
use std::net::{IpAddr, SocketAddr};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex, OnceLock};
use std::time::{Duration, Instant};
use tokio::sync::{OwnedSemaphorePermit, Semaphore};

/// How long a pre-session form token is accepted after it was issued: two hours, so a sign-in
/// page left open over lunch still works.
pub const FORM_TOKEN_SECS: u64 = 2 * 3600;
/// A page reuses the browser's token while it is younger than this, so two open tabs both work
/// and every form shown has at least `FORM_TOKEN_SECS - FORM_TOKEN_REUSE_SECS` left to be sent.
const FORM_TOKEN_REUSE_SECS: u64 = 3600;

/// Counts events per key in a sliding window, for a bounded number of keys.
#[derive(Debug)]
pub struct Throttle {
    limit: usize,
    window: Duration,
    cap: usize,
    keys: HashMap<String, VecDeque<Instant>>,
}

impl Throttle {
    /// At most `limit` events per key per `window`, for at most `cap` keys.
    pub fn new(limit: usize, window: Duration, cap: usize) -> Self {
        Throttle {
            limit,
            window,
            cap: cap.max(1),
            keys: HashMap::new(),
        }
    }

    /// Seconds until `key` may have another event, or `None` when it may now.
    pub fn blocked(&mut self, key: &str, now: Instant) -> Option<u64> {
        let window = self.window;
        if self.limit == 0 {
            // A limit of 0 allows nothing, not even a first event.
            return Some(window.as_secs().max(1));
        }
        let events = self.keys.get_mut(key)?;
        while events
            .front()
            .is_some_and(|t| now.duration_since(*t) >= window)
        {
            events.pop_front();
        }
        if events.len() < self.limit {
            return None;
        }
        let oldest = events.front().copied().unwrap_or(now);
        let left = window.saturating_sub(now.duration_since(oldest));
        // Round up, and never say 0: a client told "retry after 0" retries at once.
        Some((left.as_secs() + u64::from(left.subsec_nanos() > 0)).max(1))
    }

    /// Checks `key` and, when it is not over the limit, records one event for it.
    pub fn hit(&mut self, key: &str, now: Instant) -> Result<(), u64> {
        if let Some(retry) = self.blocked(key, now) {
            return Err(retry);
        }
        if !self.keys.contains_key(key) && self.keys.len() >= self.cap {
            self.make_room(now);
        }
        let events = self.keys.entry(key.to_string()).or_default();
        events.push_back(now);
        // Only the newest `limit` events decide anything.
        while events.len() > self.limit.max(1) {
            events.pop_front();
        }
        Ok(())
    }

    /// Takes back the newest event of `key` (an attempt that never ran).
    pub fn undo(&mut self, key: &str) {
        if let Some(events) = self.keys.get_mut(key) {
            events.pop_back();
        }
    }

    /// Forgets `key` (a successful sign-in clears its login's failures).
    pub fn clear(&mut self, key: &str) {
        self.keys.remove(key);
    }

    /// Drops keys whose events all left the window, and if that frees nothing, the key whose
    /// newest event is oldest. A linear scan, but only when the map is full, and it costs far
    /// less than the password hash the request is about to run.
    fn make_room(&mut self, now: Instant) {
        let window = self.window;
        self.keys
            .retain(|_, ev| ev.back().is_some_and(|t| now.duration_since(*t) < window));
        if self.keys.len() < self.cap {
            return;
        }
        let oldest = self
            .keys
            .iter()
            .min_by_key(|(_, ev)| ev.back().copied())
            .map(|(k, _)| k.clone());
        if let Some(k) = oldest {
            self.keys.remove(&k);
        }
    }

    /// How many keys are tracked.
    pub fn len(&self) -> usize {
        self.keys.len()
    }

    /// Whether no key is tracked.
    pub fn is_empty(&self) -> bool {
        self.keys.is_empty()
    }
}

/// The pages' defences, shared by every request of this process.
#[derive(Debug)]
pub struct Security {
    limits: SignInLimits,
    form_key: [u8; 32],
    logins: Mutex<Throttle>,
    addresses: Mutex<Throttle>,
    hashing: Arc<Semaphore>,
    waiting: AtomicUsize,
    public_url: Option<String>,
    bound: OnceLock<SocketAddr>,
}

impl Security {
    /// Fresh state around `form_key`, the secret that signs pre-session form tokens (shared by
    /// every process on the database: see [`crate::store::secrets::shared_key`]).
    pub fn new(limits: &SignInLimits, public_url: Option<String>, form_key: [u8; 32]) -> Self {
        let window = Duration::from_secs(limits.window_s);
        Security {
            limits: limits.clone(),
            form_key,
            logins: Mutex::new(Throttle::new(
                limits.failures_per_login,
                window,
                limits.tracked_keys,
            )),
            addresses: Mutex::new(Throttle::new(
                limits.attempts_per_address,
                window,
                limits.tracked_keys,
            )),
            hashing: Arc::new(Semaphore::new(limits.hashes_at_once.max(1))),
            waiting: AtomicUsize::new(0),
            public_url,
            bound: OnceLock::new(),
        }
    }

    /// Records a sign-in attempt for the login and the client address, refusing with 429 when
    /// either is over its limit. Runs before the password hash, so a refused attempt costs
    /// nothing. The login's attempt counts as a failure until [`Self::signed_in`] clears it:
    /// counting before the hash means parallel guesses cannot all slip under the limit.
    pub fn sign_in_attempt(&self, login: &str, client: &ClientAddr) -> Result<(), SecurityError> {
        let now = Instant::now();
        let too_many = |retry_after_s| SecurityError::TooMany {
            message: format!(
                "There were too many sign-in attempts for this account or from this network. \
                 Wait {} and try again.",
                minutes(retry_after_s)
            ),
            retry_after_s,
        };
        let mut addresses = self
            .addresses
            .lock()
            .map_err(|_| SecurityError::Internal("address throttle poisoned".into()))?;
        let mut logins = self
            .logins
            .lock()
            .map_err(|_| SecurityError::Internal("login throttle poisoned".into()))?;
        // Check both before recording either, so a refused login does not use up the address's
        // allowance and the other way round.
        let key = login_key(login);
        if let Some(retry) = addresses.blocked(&client.0, now) {
            return Err(too_many(retry));
        }
        if let Some(retry) = logins.blocked(&key, now) {
            return Err(too_many(retry));
        }
        addresses.hit(&client.0, now).map_err(too_many)?;
        logins.hit(&key, now).map_err(too_many)
    }

    /// An attempt recorded by [`Self::sign_in_attempt`] that never checked a password (every
    /// hashing slot was taken): it does not count against the login or the address.
    pub fn attempt_not_run(&self, login: &str, client: &ClientAddr) {
        if let Ok(mut addresses) = self.addresses.lock() {
            addresses.undo(&client.0);
        }
        if let Ok(mut logins) = self.logins.lock() {
            logins.undo(&login_key(login));
        }
    }

    /// A successful sign-in: the login's failures are forgotten.
    pub fn signed_in(&self, login: &str) {
        if let Ok(mut logins) = self.logins.lock() {
            logins.clear(&login_key(login));
        }
    }

    /// A slot to run one password hash in, or 503 when the slots stay taken for longer than
    /// the configured wait or too many requests already wait.
    pub async fn hash_slot(&self) -> Result<OwnedSemaphorePermit, SecurityError> {
        if let Ok(permit) = self.hashing.clone().try_acquire_owned() {
            return Ok(permit);
        }
        let busy = || SecurityError::Busy {
            retry_after_s: self.limits.hash_wait_ms.div_ceil(1000).max(1),
        };
        let ahead = self.waiting.fetch_add(1, Ordering::SeqCst);
        let _leave = LeaveQueue(&self.waiting);
        if ahead >= self.limits.hash_queue {
            return Err(busy());
        }
        let wait = Duration::from_millis(self.limits.hash_wait_ms);
        match tokio::time::timeout(wait, self.hashing.clone().acquire_owned()).await {
            Ok(Ok(permit)) => Ok(permit),
            _ => Err(busy()),
        }
    }

    /// A new pre-session form token: `time.nonce.mac`, the MAC keyed by the database's shared secret,
    /// so only tokens we issued pass [`Self::form_token_age`].
    pub fn issue_form_token(&self) -> Result<String, SecurityError> {
        let mut nonce = [0u8; 16];
        getrandom::fill(&mut nonce)
            .map_err(|e| SecurityError::Internal(format!("no randomness: {e}")))?;
        let payload = format!("{:x}.{}", unix_s(), hex::encode(nonce));
        let mac = hex::encode(hmac_sha256(&self.form_key, payload.as_bytes()));
        Ok(format!("{payload}.{mac}"))
    }

    /// The age in seconds of a form token we issued and that has not expired; `None` for
    /// anything else.
    pub fn form_token_age(&self, token: &str) -> Option<u64> {
        let (payload, mac) = token.rsplit_once('.')?;
        let (time, nonce) = payload.split_once('.')?;
        if nonce.len() != 32 || !nonce.bytes().all(|b| b.is_ascii_hexdigit()) {
            return None;
        }
        let expected = hex::encode(hmac_sha256(&self.form_key, payload.as_bytes()));
        if !same_secret(mac, &expected) {
            return None;
        }
        let issued = u64::from_str_radix(time, 16).ok()?;
        let age = unix_s().checked_sub(issued)?;
        (age < FORM_TOKEN_SECS).then_some(age)
    }

    /// The token for a page showing a pre-session form: the browser's own while it is ours and
    /// young enough, else a new one; with the cookie's lifetime in seconds.
    pub fn form_token_for(&self, current: Option<&str>) -> Result<(String, u64), SecurityError> {
        if let Some(t) = current
            && let Some(age) = self.form_token_age(t)
            && age < FORM_TOKEN_REUSE_SECS
        {
            return Ok((t.to_string(), FORM_TOKEN_SECS - age));
        }
        Ok((self.issue_form_token()?, FORM_TOKEN_SECS))
    }

    /// Records the address the server listens on (known only after binding).
    pub fn set_bound(&self, addr: SocketAddr) {
        self.bound.set(addr).ok();
    }

    /// Where links we hand out (invites, the start-up link) point: the configured public URL;
    /// without one, the request's `Host` when it names this server (its bound address, or
    /// localhost / 127.0.0.1 / [::1] with the bound port), else the bound address. A forged
    /// `Host` header therefore never makes us hand out a link to another host.
    pub fn link_base(&self, headers: Option<&HeaderMap>) -> String {
        if let Some(url) = &self.public_url {
            return url.clone();
        }
        let Some(addr) = self.bound.get().copied() else {
            // Not serving (a router built without `serve`): nothing better than loopback.
            return "http://localhost".into();
        };
        let own = reachable(addr);
        let port = addr.port();
        let host = headers
            .and_then(|h| h.get(axum::http::header::HOST))
            .and_then(|v| v.to_str().ok())
            .map(str::to_ascii_lowercase)
            .filter(|h| {
                *h == own
                    || *h == addr.to_string()
                    || [
                        format!("localhost:{port}"),
                        format!("127.0.0.1:{port}"),
                        format!("[::1]:{port}"),
                    ]
                    .contains(h)
            });
        format!("http://{}", host.unwrap_or(own))
    }
}

/// An address a browser can open for a bound socket: one bound to all interfaces is still
/// reachable on loopback.
pub fn reachable(addr: SocketAddr) -> String {
    if addr.ip().is_unspecified() {
        match addr {
            SocketAddr::V4(_) => format!("127.0.0.1:{}", addr.port()),
            SocketAddr::V6(_) => format!("[::1]:{}", addr.port()),
        }
    } else {
        addr.to_string()
    }
}

/// Leaves the hashing queue when the waiting request ends, however it ends.
struct LeaveQueue<'a>(&'a AtomicUsize);

impl Drop for LeaveQueue<'_> {
    fn drop(&mut self) {
        self.0.fetch_sub(1, Ordering::SeqCst);
    }
}

/// The throttle key of a login: normalised as sign-in does, and cut short so an absurdly long
/// login cannot make a large key.
/// Compares two secrets in time independent of where they differ.
pub fn same_secret(a: &str, b: &str) -> bool {
    let (a, b) = (a.as_bytes(), b.as_bytes());
    if a.len() != b.len() {
        return false;
    }
    a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

fn login_key(login: &str) -> String {
    login.trim().to_lowercase().chars().take(128).collect()
}

fn minutes(s: u64) -> String {
    match s.div_ceil(60) {
        0 | 1 => "a minute".into(),
        m => format!("{m} minutes"),
    }
}

fn unix_s() -> u64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs())
        .unwrap_or(0)
}

/// HMAC-SHA256 (RFC 2104) over `sha2`, which is already a dependency; the key is 32 bytes, less
/// than the block, so it is only padded.
fn hmac_sha256(key: &[u8; 32], message: &[u8]) -> [u8; 32] {
    let mut ipad = [0x36u8; 64];
    let mut opad = [0x5cu8; 64];
    for (i, k) in key.iter().enumerate() {
        ipad[i] ^= k;
        opad[i] ^= k;
    }
    let inner = Sha256::new()
        .chain_update(ipad)
        .chain_update(message)
        .finalize();
    Sha256::new()
        .chain_update(opad)
        .chain_update(inner)
        .finalize()
        .into()
}

/// The client a sign-in comes from, as a throttle key: the socket peer's IP address (an IPv6
/// client by its /64, since one host usually holds a whole /64). `X-Forwarded-For` is not
/// trusted: any client can send it. Behind a reverse proxy every client therefore shares the
/// proxy's address and its allowance.
#[derive(Debug, Clone)]
pub struct ClientAddr(pub String);

impl<S: Send + Sync> FromRequestParts<S> for ClientAddr {
    type Rejection = std::convert::Infallible;

    async fn from_request_parts(parts: &mut Parts, _: &S) -> Result<Self, Self::Rejection> {
        let ip = parts
            .extensions
            .get::<ConnectInfo<SocketAddr>>()
            .map(|c| c.0.ip());
        Ok(ClientAddr(match ip {
            Some(ip) => address_key(ip),
            // A router called without a socket (in-process tests): one shared key.
            None => "unknown".into(),
        }))
    }
}

fn address_key(ip: IpAddr) -> String {
    match ip {
        IpAddr::V4(v4) => v4.to_string(),
        IpAddr::V6(v6) => match v6.to_ipv4_mapped() {
            Some(v4) => v4.to_string(),
            None => {
                let s = v6.segments();
                format!("{:x}:{:x}:{:x}:{:x}::/64", s[0], s[1], s[2], s[3])
            }
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn key(b: u8) -> [u8; 32] {
        [b; 32]
    }

    #[test]
    fn throttle_refuses_over_the_limit_and_forgets_after_the_window() {
        let mut t = Throttle::new(2, Duration::from_secs(60), 10);
        let t0 = Instant::now();
        assert!(t.hit("a", t0).is_ok());
        assert!(t.hit("a", t0).is_ok());
        let retry = t.hit("a", t0).expect_err("third within the window");
        assert_eq!(retry, 60);
        assert!(t.hit("b", t0).is_ok(), "other keys are separate");
        t.undo("a");
        assert!(t.hit("a", t0).is_ok(), "an undone event does not count");
        assert!(t.hit("a", t0).is_err());
        assert!(t.hit("a", t0 + Duration::from_secs(60)).is_ok());
        t.clear("a");
        assert!(t.blocked("a", t0).is_none());
    }

    #[test]
    fn throttle_keeps_a_bounded_number_of_keys() {
        let mut t = Throttle::new(1, Duration::from_secs(60), 3);
        let t0 = Instant::now();
        for (i, k) in ["a", "b", "c", "d", "e"].iter().enumerate() {
            t.hit(k, t0 + Duration::from_millis(i as u64))
                .expect("new key");
        }
        assert_eq!(t.len(), 3);
        assert!(t.blocked("a", t0).is_none(), "the oldest was forgotten");
        assert!(t.blocked("e", t0 + Duration::from_millis(5)).is_some());
    }

    #[test]
    fn form_tokens_are_ours_or_refused() {
        let s = Security::new(&SignInLimits::default(), None, key(1));
        let t = s.issue_form_token().expect("token");
        assert_eq!(s.form_token_age(&t), Some(0));
        let other = Security::new(&SignInLimits::default(), None, key(2));
        assert_eq!(other.form_token_age(&t), None, "another key");
        // The last hex digit changed to another one (never the same digit again).
        let last = if t.ends_with('0') { '1' } else { '0' };
        let forged = format!("{}{last}", &t[..t.len() - 1]);
        assert_eq!(s.form_token_age(&forged), None);
        assert_eq!(s.form_token_age(&"a".repeat(64)), None);
        assert_eq!(s.form_token_age(""), None);
        // An old token with a valid MAC is refused too.
        let payload = format!("{:x}.{}", unix_s() - FORM_TOKEN_SECS, "0".repeat(32));
        let mac = hex::encode(hmac_sha256(&s.form_key, payload.as_bytes()));
        assert_eq!(s.form_token_age(&format!("{payload}.{mac}")), None);
    }

    #[test]
    fn hmac_matches_rfc_4231_case_1() {
        // Case 1 has a 20-byte key; HMAC pads keys with zeros, so the same key zero-padded to our
        // 32 bytes must give the RFC's value.
        let mut key = [0u8; 32];
        key[..20].copy_from_slice(&[0x0b; 20]);
        assert_eq!(
            hex::encode(hmac_sha256(&key, b"Hi There")),
            "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7"
        );
    }

    #[tokio::test]
    async fn hashing_slots_are_bounded_and_busy_beyond_the_queue() {
        let limits = SignInLimits {
            hashes_at_once: 1,
            hash_queue: 0,
            hash_wait_ms: 10,
            ..SignInLimits::default()
        };
        let s = Security::new(&limits, None, key(1));
        let held = s.hash_slot().await.expect("the one slot");
        match s.hash_slot().await {
            Err(SecurityError::Busy { retry_after_s }) => assert_eq!(retry_after_s, 1),
            other => panic!("expected busy, got {other:?}"),
        }
        drop(held);
        assert!(s.hash_slot().await.is_ok(), "free again");
    }
}
