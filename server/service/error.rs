//! The one error of the service layer. Each edge turns it into its own answer: the API into the
//! contract's JSON error body with a status, the pages into a readable page or a flash message.

/// Every way a request can fail, in the words of the HTTP contract (the codes are the contract's).
#[derive(Debug, thiserror::Error)]
pub enum ServiceError {
    /// No or unknown credentials (401).
    #[error("sign in or send Authorization: Bearer TOKEN")]
    Unauthorized,
    /// Authenticated, but the role is too low (403).
    #[error("{0}")]
    Forbidden(String),
    /// Unknown id, or an id of another team (404).
    #[error("{0}")]
    NotFound(String),
    /// The body breaks a rule (422), naming the field where one applies.
    #[error("{message}")]
    Invalid {
        /// snake_case code.
        code: &'static str,
        /// For a person.
        message: String,
        /// JSON path of the offending field.
        field: Option<String>,
    },
    /// A body larger than the route admits (413).
    #[error("{0}")]
    TooLarge(String),
    /// A content type the route does not take (415).
    #[error("{0}")]
    UnsupportedMediaType(String),
    /// A write without `If-Match` (428).
    #[error("send If-Match with the ETag of the latest revision")]
    PreconditionRequired,
    /// A write whose `If-Match` is stale (412).
    #[error("{0}")]
    PreconditionFailed(String),
    /// A request that conflicts with stored state (409).
    #[error("{0}")]
    Conflict(String),
    /// The database cannot be reached (503).
    #[error("the database is unavailable")]
    Unavailable,
    /// Too many heavy requests at once (503 with `Retry-After: 1`).
    #[error("the server is busy with other heavy requests; retry in a second")]
    Busy,
    /// Every password-hashing slot is taken (503 with `Retry-After`).
    #[error("the server is busy checking other sign-ins; retry in {retry_after_s} s")]
    HashingBusy {
        /// Seconds to wait.
        retry_after_s: u64,
    },
    /// Too many sign-in attempts (429 with `Retry-After`).
    #[error("{message}")]
    TooMany {
        /// For the person.
        message: String,
        /// Seconds until the next attempt may succeed.
        retry_after_s: u64,
    },
    /// Anything unexpected (500); details go to the log only.
    #[error("internal error")]
    Internal(String),
}

impl ServiceError {
    /// A 422 with a field.
    pub fn invalid(
        code: &'static str,
        field: impl Into<String>,
        message: impl Into<String>,
    ) -> Self {
        Self::Invalid {
            code,
            message: message.into(),
            field: Some(field.into()),
        }
    }

    /// A 422 without a field.
    pub fn invalid_body(code: &'static str, message: impl Into<String>) -> Self {
        Self::Invalid {
            code,
            message: message.into(),
            field: None,
        }
    }

    /// snake_case code of this error.
    pub fn code(&self) -> &'static str {
        match self {
            ServiceError::Unauthorized => "unauthorized",
            ServiceError::Forbidden(_) => "forbidden",
            ServiceError::NotFound(_) => "not_found",
            ServiceError::Invalid { code, .. } => code,
            ServiceError::TooLarge(_) => "too_large",
            ServiceError::UnsupportedMediaType(_) => "unsupported_media_type",
            ServiceError::PreconditionRequired => "precondition_required",
            ServiceError::PreconditionFailed(_) => "stale_revision",
            ServiceError::Conflict(_) => "conflict",
            ServiceError::Unavailable => "unavailable",
            ServiceError::Busy | ServiceError::HashingBusy { .. } => "busy",
            ServiceError::TooMany { .. } => "too_many_attempts",
            ServiceError::Internal(_) => "internal",
        }
    }

    /// The field, where one applies.
    pub fn field(&self) -> Option<&str> {
        match self {
            ServiceError::Invalid { field, .. } => field.as_deref(),
            _ => None,
        }
    }
}

impl From<crate::store::StoreError> for ServiceError {
    fn from(e: crate::store::StoreError) -> Self {
        use crate::store::StoreError;
        match e {
            StoreError::Unavailable(detail) => {
                tracing::warn!(%detail, "database unavailable");
                ServiceError::Unavailable
            }
            StoreError::MissingReference(_) => ServiceError::invalid_body(
                "unknown_reference",
                "a referenced object does not exist",
            ),
            other => ServiceError::Internal(other.to_string()),
        }
    }
}

impl From<goalsmith_core::goal::GoalError> for ServiceError {
    fn from(e: goalsmith_core::goal::GoalError) -> Self {
        ServiceError::Invalid {
            code: e.code,
            message: e.message,
            field: Some(e.field),
        }
    }
}

impl From<crate::security::SecurityError> for ServiceError {
    fn from(e: crate::security::SecurityError) -> Self {
        use crate::security::SecurityError as S;
        match e {
            S::TooMany {
                message,
                retry_after_s,
            } => ServiceError::TooMany {
                message,
                retry_after_s,
            },
            S::Busy { retry_after_s } => ServiceError::HashingBusy { retry_after_s },
            S::Internal(detail) => ServiceError::Internal(detail),
        }
    }
}

/// Shorthand for service results.
pub type ServiceResult<T> = Result<T, ServiceError>;
