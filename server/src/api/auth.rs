//! Bearer-token authentication and the access rules.
//!
//! - no `Authorization: Bearer <token>`, an unknown token, or a revoked key: 401;
//! - a key whose scope is below what the route needs: 403;
//! - a structure outside a key's structure list: 404, exactly as for a structure that
//!   does not exist.

use axum::extract::FromRequestParts;
use axum::http::header;
use axum::http::request::Parts;

use super::AppState;
use super::problem::ApiError;
use crate::keys::token_hash;
use crate::model::{ApiKey, Scope, Structure};

/// The authenticated caller of a request.
#[derive(Debug, Clone)]
pub struct Caller {
    /// The caller's key.
    pub key: ApiKey,
}

impl FromRequestParts<AppState> for Caller {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        let value = parts.headers.get(header::AUTHORIZATION).ok_or_else(|| {
            ApiError::Unauthorized("send an API key as `Authorization: Bearer <token>`".into())
        })?;
        let token = value
            .to_str()
            .ok()
            .and_then(|v| {
                let (scheme, token) = v.split_once(' ')?;
                scheme.eq_ignore_ascii_case("bearer").then(|| token.trim())
            })
            .filter(|t| !t.is_empty())
            .ok_or_else(|| {
                ApiError::Unauthorized("the Authorization header must be `Bearer <token>`".into())
            })?;
        let key = state
            .store
            .key_by_hash(&token_hash(token))
            .await?
            .filter(|k| k.revoked_at.is_none())
            .ok_or_else(|| {
                ApiError::Unauthorized("the API key is not valid (unknown or revoked)".into())
            })?;
        Ok(Self { key })
    }
}

impl Caller {
    /// Ok when the key's scope is at least `needed`, else 403.
    pub fn require(&self, needed: Scope) -> Result<(), ApiError> {
        if self.key.scope >= needed {
            Ok(())
        } else {
            Err(ApiError::Forbidden(format!(
                "this request needs the {} scope; the key has {}",
                needed.as_str(),
                self.key.scope.as_str()
            )))
        }
    }

    /// Ok when the key may see structure `id`; otherwise the same 404 as for a structure
    /// that does not exist.
    pub fn may_see(&self, id: &str) -> Result<(), ApiError> {
        if self.key.sees(id) {
            Ok(())
        } else {
            Err(not_found(id))
        }
    }

    /// The scope check, then structure `id` if it exists and the key may see it.
    pub async fn structure(
        &self,
        state: &AppState,
        needed: Scope,
        id: &str,
    ) -> Result<Structure, ApiError> {
        self.require(needed)?;
        self.may_see(id)?;
        state
            .store
            .get_structure(id)
            .await?
            .ok_or_else(|| not_found(id))
    }
}

/// The 404 for structure `id`.
pub fn not_found(id: &str) -> ApiError {
    ApiError::NotFound(format!("structure {id} does not exist"))
}
