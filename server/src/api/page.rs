//! Cursor pagination: `?cursor=…&limit=…` in, `next_cursor` out.
//!
//! A cursor is opaque to clients: the hex of a small JSON value (the sort key of the
//! last item of the page). A cursor that does not decode is a 422 on `/cursor`.

use serde::Deserialize;
use serde::Serialize;
use serde::de::DeserializeOwned;
use utoipa::IntoParams;

use super::problem::ApiError;
use crate::keys::hex;

/// Items per page when `limit` is absent.
pub const DEFAULT_LIMIT: usize = 100;
/// Largest `limit`.
pub const MAX_LIMIT: usize = 1000;

/// Paging parameters of a list.
#[derive(Debug, Clone, Default, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct PageQuery {
    /// `next_cursor` of the previous page; absent for the first page.
    pub cursor: Option<String>,
    /// Items per page, 1–1000 (default 100).
    pub limit: Option<usize>,
}

impl PageQuery {
    /// The page size, checked.
    pub fn limit(&self) -> Result<usize, ApiError> {
        match self.limit {
            None => Ok(DEFAULT_LIMIT),
            Some(n) if (1..=MAX_LIMIT).contains(&n) => Ok(n),
            Some(n) => Err(ApiError::field(
                "/limit",
                format!("limit must be 1 to {MAX_LIMIT}, not {n}"),
            )),
        }
    }

    /// The decoded sort key after which the page starts.
    pub fn after<K: DeserializeOwned>(&self) -> Result<Option<K>, ApiError> {
        self.cursor.as_deref().map(decode_cursor).transpose()
    }

    /// The `(time, ID)` key after which the page starts, for lists ordered by a time
    /// and then an ID (the cursor keeps the time as Unix nanoseconds, see
    /// [`time_id_key`]).
    pub fn after_time_id(&self) -> Result<Option<(time::OffsetDateTime, uuid::Uuid)>, ApiError> {
        let after: Option<(i128, uuid::Uuid)> = self.after()?;
        after
            .map(|(ns, id)| {
                time::OffsetDateTime::from_unix_timestamp_nanos(ns)
                    .map(|t| (t, id))
                    .map_err(|_| {
                        ApiError::field("/cursor", "the cursor is not one this service issued")
                    })
            })
            .transpose()
    }
}

/// Encode a sort key as a cursor.
pub fn encode_cursor<K: Serialize>(key: &K) -> String {
    hex(&serde_json::to_vec(key).unwrap_or_default())
}

/// Decode a cursor made by [`encode_cursor`].
pub fn decode_cursor<K: DeserializeOwned>(cursor: &str) -> Result<K, ApiError> {
    let bad = || ApiError::field("/cursor", "the cursor is not one this service issued");
    if !cursor.len().is_multiple_of(2) || cursor.len() > 4096 {
        return Err(bad());
    }
    let bytes = (0..cursor.len())
        .step_by(2)
        .map(|i| u8::from_str_radix(cursor.get(i..i + 2).unwrap_or("zz"), 16))
        .collect::<Result<Vec<u8>, _>>()
        .map_err(|_| bad())?;
    serde_json::from_slice(&bytes).map_err(|_| bad())
}

/// Helpers for a page fetched with one item more than `limit`.
pub struct Page;

impl Page {
    /// Cut `items` (fetched with `limit + 1`) to `limit`; the cursor of the next page
    /// when there is one.
    pub fn from_overfetch<T, K: Serialize>(
        items: &mut Vec<T>,
        limit: usize,
        key: impl Fn(&T) -> K,
    ) -> Option<String> {
        if items.len() > limit {
            items.truncate(limit);
            items.last().map(|last| encode_cursor(&key(last)))
        } else {
            None
        }
    }
}

/// The cursor key of an item in a list ordered by `(time, ID)` (read back by
/// [`PageQuery::after_time_id`]).
pub fn time_id_key(t: time::OffsetDateTime, id: uuid::Uuid) -> (i128, uuid::Uuid) {
    (t.unix_timestamp_nanos(), id)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cursors_round_trip_and_garbage_is_refused() {
        let c = encode_cursor(&("2026-12-01T00:00:00Z", "abc"));
        let back: (String, String) = decode_cursor(&c).expect("must succeed");
        assert_eq!(back, ("2026-12-01T00:00:00Z".to_owned(), "abc".to_owned()));
        assert!(decode_cursor::<String>("zz").is_err());
        assert!(decode_cursor::<String>("abc").is_err());
        assert!(decode_cursor::<(String, String)>(&encode_cursor(&5)).is_err());
    }

    #[test]
    fn overfetch_cuts_and_gives_the_last_key() {
        let mut v = vec![1, 2, 3];
        assert_eq!(
            Page::from_overfetch(&mut v, 2, |x| *x),
            Some(encode_cursor(&2))
        );
        assert_eq!(v, [1, 2]);
        let mut w = vec![1];
        assert_eq!(Page::from_overfetch(&mut w, 2, |x| *x), None);
    }
}
