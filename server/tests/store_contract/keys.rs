//! API keys.

use kinema_server::keys::{new_key, token_hash};
use kinema_server::model::Scope;
use kinema_server::store::DynStore;

crate::contract!(
    keys_are_found_by_hash_listed_and_revoked,
    a_token_hash_is_unique
);

async fn keys_are_found_by_hash_listed_and_revoked(store: DynStore) {
    let (t1, k1) = new_key("logger A", Scope::Write, Some(vec!["ALRW-01".into()])).expect("key");
    let (_t2, k2) = new_key("admin", Scope::Admin, None).expect("key");
    store.insert_key(&k1).await.expect("insert");
    store.insert_key(&k2).await.expect("insert");
    let found = store.key_by_hash(&token_hash(&t1)).await.expect("get");
    assert_eq!(found.as_ref(), Some(&k1));
    assert_eq!(
        store
            .key_by_hash(&token_hash("kn_wrong"))
            .await
            .expect("get"),
        None
    );
    let all = store.list_keys().await.expect("list");
    assert_eq!(all.len(), 2);
    assert!(store.revoke_key(k1.id).await.expect("revoke"));
    assert!(
        !store.revoke_key(k1.id).await.expect("revoke twice"),
        "already revoked"
    );
    let after = store
        .key_by_hash(&token_hash(&t1))
        .await
        .expect("get")
        .expect("still listed");
    assert!(after.revoked_at.is_some());
    assert!(
        !store
            .revoke_key(uuid::Uuid::new_v4())
            .await
            .expect("unknown")
    );
}

async fn a_token_hash_is_unique(store: DynStore) {
    let (_t, k) = new_key("a", Scope::Read, None).expect("key");
    store.insert_key(&k).await.expect("insert");
    let mut dup = k.clone();
    dup.id = uuid::Uuid::new_v4();
    let e = store.insert_key(&dup).await.expect_err("refused");
    assert!(e.is_unique_violation(), "{e:?}");
}
