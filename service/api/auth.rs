//! The bearer token that every write needs.

use axum::http::{HeaderMap, StatusCode};

use super::error::ApiError;

/// Compares in time independent of where the strings differ, so the
/// token cannot be guessed a character at a time from response times.
fn same(a: &[u8], b: &[u8]) -> bool {
    if a.len() != b.len() {
        return false;
    }
    a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

/// Checks the request's `Authorization: Bearer <token>`.
pub fn require_token(expected: Option<&str>, headers: &HeaderMap) -> Result<(), ApiError> {
    let Some(expected) = expected else {
        return Err(ApiError::new(
            StatusCode::UNAUTHORIZED,
            "writes_disabled",
            "no API token is configured (api.token_file or PERIHELIX_API_TOKEN), so writes are refused",
        ));
    };
    let given = headers
        .get(axum::http::header::AUTHORIZATION)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.strip_prefix("Bearer "));
    match given {
        Some(t) if same(t.trim().as_bytes(), expected.as_bytes()) => Ok(()),
        Some(_) => Err(ApiError::new(
            StatusCode::UNAUTHORIZED,
            "bad_token",
            "the bearer token is not the configured one",
        )),
        None => Err(ApiError::new(
            StatusCode::UNAUTHORIZED,
            "token_required",
            "this request writes: send Authorization: Bearer <token>",
        )),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tokens_must_match_exactly() {
        let mut h = HeaderMap::new();
        assert!(require_token(Some("s3cret"), &h).is_err());
        h.insert("authorization", "Bearer s3cre".parse().unwrap());
        assert!(require_token(Some("s3cret"), &h).is_err());
        h.insert("authorization", "Bearer s3cret".parse().unwrap());
        assert!(require_token(Some("s3cret"), &h).is_ok());
        assert!(require_token(None, &h).is_err());
    }
}
