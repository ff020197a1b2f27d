//! Request extractors that fail with problem details: a JSON body with a JSON pointer
//! to the first bad field, and checks on the content type and size.

use axum::body::Bytes;
use axum::extract::{FromRequest, FromRequestParts, Request};
use axum::http::header;
use axum::http::request::Parts;
use serde::de::DeserializeOwned;
use serde_json::error::Category;

use super::problem::{ApiError, FieldError};

/// A JSON request body of type `T`.
///
/// - `Content-Type` must be `application/json` (or a `+json` type): otherwise 415;
/// - a body over the configured limit: 413;
/// - not JSON at all (including `NaN` and `Infinity`, which JSON does not have): 400;
/// - JSON whose fields do not fit `T` (missing, unknown, wrong type): 422 with the
///   pointer of the field.
pub struct ApiJson<T>(pub T);

/// Query parameters of type `T`; a parameter that does not fit (a number that is not
/// one, an unknown value) is a 422 whose pointer names it (`/limit`, `/format`).
pub struct ApiQuery<T>(pub T);

impl<T, S> FromRequestParts<S> for ApiQuery<T>
where
    T: DeserializeOwned,
    S: Send + Sync,
{
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, _state: &S) -> Result<Self, Self::Rejection> {
        let query = parts.uri.query().unwrap_or("");
        let de = serde_urlencoded::Deserializer::new(form_urlencoded::parse(query.as_bytes()));
        serde_path_to_error::deserialize(de)
            .map(ApiQuery)
            .map_err(|e| {
                let pointer = pointer_of(e.path());
                ApiError::field(
                    if pointer.is_empty() {
                        "/".to_owned()
                    } else {
                        pointer
                    },
                    format!("query parameter: {}", e.into_inner()),
                )
            })
    }
}

/// Whether `content_type` is JSON (`application/json`, `application/*+json`).
pub fn is_json(content_type: &str) -> bool {
    let essence = content_type
        .split(';')
        .next()
        .unwrap_or("")
        .trim()
        .to_ascii_lowercase();
    essence == "application/json"
        || (essence.starts_with("application/") && essence.ends_with("+json"))
}

/// The request's content type, or `""`.
pub fn content_type(req: &Request) -> String {
    req.headers()
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_owned()
}

impl<T, S> FromRequest<S> for ApiJson<T>
where
    T: DeserializeOwned,
    S: Send + Sync,
{
    type Rejection = ApiError;

    async fn from_request(req: Request, state: &S) -> Result<Self, Self::Rejection> {
        let ct = content_type(&req);
        if !is_json(&ct) {
            return Err(ApiError::UnsupportedMediaType {
                got: ct,
                expected: "application/json",
            });
        }
        let bytes = Bytes::from_request(req, state)
            .await
            .map_err(|e| body_error(&e.body_text()))?;
        parse_json(&bytes).map(ApiJson)
    }
}

/// The error for a body that could not be read (over the limit, or cut off).
pub fn body_error(text: &str) -> ApiError {
    if text.contains("length limit") || text.contains("too large") {
        ApiError::TooLarge(
            "the request body is over the configured size limit (KINEMA_MAX_BODY_BYTES)".into(),
        )
    } else {
        ApiError::Malformed {
            detail: format!("the request body could not be read: {text}"),
        }
    }
}

/// Parse `bytes` as `T`, mapping errors as [`ApiJson`] documents.
pub fn parse_json<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, ApiError> {
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let value = serde_path_to_error::deserialize(&mut de).map_err(|e| {
        // A body that is not JSON at all is malformed (400) even when a field error
        // comes first (`{} x` misses a field before the trailing text is reached).
        if let Err(syntax) = serde_json::from_slice::<serde::de::IgnoredAny>(bytes) {
            return json_error(&syntax, String::new());
        }
        let pointer = pointer_of(e.path());
        let inner = e.into_inner();
        json_error(&inner, pointer)
    })?;
    de.end().map_err(|e| json_error(&e, String::new()))?;
    Ok(value)
}

fn json_error(e: &serde_json::Error, pointer: String) -> ApiError {
    match e.classify() {
        Category::Data => {
            let msg = e.to_string();
            // serde_json appends " at line L column C"; the pointer says where.
            let msg = msg
                .rsplit_once(" at line ")
                .map_or(msg.as_str(), |(m, _)| m)
                .to_owned();
            ApiError::fields(vec![FieldError::new(
                if pointer.is_empty() {
                    "/".to_owned()
                } else {
                    pointer
                },
                msg,
            )])
        }
        Category::Syntax | Category::Eof | Category::Io => ApiError::Malformed {
            detail: format!(
                "the body is not valid JSON: {e} (JSON has no NaN or Infinity; send finite numbers)"
            ),
        },
    }
}

/// The JSON pointer (RFC 6901) of a serde path.
pub fn pointer_of(path: &serde_path_to_error::Path) -> String {
    use serde_path_to_error::Segment;
    let mut out = String::new();
    for seg in path.iter() {
        match seg {
            Segment::Seq { index } => {
                out.push('/');
                out.push_str(&index.to_string());
            }
            Segment::Map { key } => {
                out.push('/');
                out.push_str(&key.replace('~', "~0").replace('/', "~1"));
            }
            Segment::Enum { variant } => {
                out.push('/');
                out.push_str(variant);
            }
            Segment::Unknown => {}
        }
    }
    out
}

/// A UUID from the path (`pointer` names the parameter, e.g. `/job_id`), or a 422
/// naming it.
pub fn path_uuid(pointer: &str, raw: &str) -> Result<uuid::Uuid, ApiError> {
    uuid::Uuid::parse_str(raw)
        .map_err(|_| ApiError::field(pointer, format!("{raw:?} is not a UUID")))
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde::Deserialize;

    #[derive(Debug, Deserialize)]
    #[serde(deny_unknown_fields)]
    #[allow(dead_code)]
    struct Doc {
        points: Vec<P>,
    }
    #[derive(Debug, Deserialize)]
    #[serde(deny_unknown_fields)]
    #[allow(dead_code)]
    struct P {
        id: String,
        x: Vec<f64>,
    }

    fn pointer(e: ApiError) -> String {
        match e {
            ApiError::Invalid { errors, .. } => errors[0].pointer.clone(),
            other => panic!("not a field error: {other:?}"),
        }
    }

    #[test]
    fn a_wrong_type_points_at_its_field() {
        let e = parse_json::<Doc>(br#"{"points":[{"id":"A","x":[1,2]},{"id":"B","x":[1,"y"]}]}"#)
            .expect_err("must be refused");
        assert_eq!(pointer(e), "/points/1/x/1");
    }

    #[test]
    fn an_unknown_field_is_named() {
        let e = parse_json::<Doc>(br#"{"points":[{"id":"A","x":[1,2],"q":1}]}"#)
            .expect_err("must be refused");
        let ApiError::Invalid { errors, .. } = e else {
            panic!("not invalid")
        };
        assert!(errors[0].detail.contains("unknown field `q`"), "{errors:?}");
        assert_eq!(errors[0].pointer, "/points/0/q");
    }

    #[test]
    fn nan_and_garbage_are_malformed() {
        for body in [
            &br#"{"points":[{"id":"A","x":[NaN,2]}]}"#[..],
            b"{",
            br#"{"points":[]} x"#,
        ] {
            assert!(matches!(
                parse_json::<Doc>(body),
                Err(ApiError::Malformed { .. })
            ));
        }
    }

    #[test]
    fn json_media_types() {
        assert!(is_json("application/json"));
        assert!(is_json("application/json; charset=utf-8"));
        assert!(is_json("application/merge-patch+json"));
        assert!(!is_json("text/csv"));
        assert!(!is_json(""));
    }

    #[test]
    fn pointer_escapes_per_rfc6901() {
        #[derive(Debug, Deserialize)]
        #[allow(dead_code)]
        struct M {
            m: std::collections::BTreeMap<String, f64>,
        }
        let e = parse_json::<M>(br#"{"m":{"a/b~c":"x"}}"#).expect_err("must be refused");
        assert_eq!(pointer(e), "/m/a~1b~0c");
    }
}
