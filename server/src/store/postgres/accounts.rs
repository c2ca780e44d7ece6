//! Accounts over PostgreSQL: users and roles, sessions, devices, integration tokens, sign-in throttling and the audit trail.
#![allow(unused_imports, unused_variables)]

use super::PgStore;
use super::tx::{PgTx, not_yet};
use crate::accounts::DeviceId;
use crate::accounts::Principal;
use crate::accounts::Role;
use crate::accounts::User;
use crate::accounts::UserId;
use crate::accounts::UserName;
use crate::accounts::audit::Action;
use crate::accounts::audit::Actor;
use crate::accounts::audit::AuditEvent;
use crate::accounts::audit::AuditRow;
use crate::accounts::audit::AuditTx;
use crate::accounts::secret::CsrfToken;
use crate::accounts::secret::SecretHash;
use crate::accounts::store::AccountStore;
use crate::accounts::store::ApiTokenRow;
use crate::accounts::store::DeviceRow;
use crate::accounts::store::NewApiToken;
use crate::accounts::store::NewDevice;
use crate::accounts::store::NewSession;
use crate::accounts::store::NewUser;
use crate::accounts::store::SecretKind;
use crate::accounts::store::SessionState;
use crate::accounts::store::SiteUser;
use crate::accounts::store::StoredCredentials;
use crate::accounts::throttle::Failures;
use crate::master::SiteId;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use async_trait::async_trait;
use serde::Serialize;
use serde_json::Value;

#[async_trait::async_trait]
impl crate::accounts::store::AccountStore for PgStore {
    async fn create_user(&self, user: NewUser, audit: AuditEvent) -> Result<User, StoreError> {
        Err(not_yet("AccountStore::create_user"))
    }

    async fn user(&self, name: &UserName) -> Result<Option<User>, StoreError> {
        Err(not_yet("AccountStore::user"))
    }

    async fn credentials(&self, name: &UserName) -> Result<Option<StoredCredentials>, StoreError> {
        Err(not_yet("AccountStore::credentials"))
    }

    async fn set_secret(
        &self,
        name: &UserName,
        kind: SecretKind,
        hash: SecretHash,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::set_secret"))
    }

    async fn set_roles(
        &self,
        name: &UserName,
        site: SiteId,
        roles: Vec<Role>,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::set_roles"))
    }

    async fn roles_at(&self, user: UserId, site: SiteId) -> Result<Vec<Role>, StoreError> {
        Err(not_yet("AccountStore::roles_at"))
    }

    async fn site_users(
        &self,
        site: SiteId,
        since: Timestamp,
    ) -> Result<Vec<SiteUser>, StoreError> {
        Err(not_yet("AccountStore::site_users"))
    }

    async fn claim_sign_in_attempt(
        &self,
        account_key: String,
        address_key: String,
        at: Timestamp,
        window_start: Timestamp,
    ) -> Result<Failures, StoreError> {
        Err(not_yet("AccountStore::claim_sign_in_attempt"))
    }

    async fn sign_in_succeeded(
        &self,
        account_key: String,
        address_key: String,
        at: Timestamp,
    ) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::sign_in_succeeded"))
    }

    async fn unlock_account(
        &self,
        account_key: String,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::unlock_account"))
    }

    async fn start_session(
        &self,
        session: NewSession,
        account_key: String,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::start_session"))
    }

    async fn session(&self, id_digest: String) -> Result<Option<SessionState>, StoreError> {
        Err(not_yet("AccountStore::session"))
    }

    async fn touch_session(&self, id_digest: String, at: Timestamp) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::touch_session"))
    }

    async fn end_session(
        &self,
        id_digest: String,
        audit: Option<AuditEvent>,
    ) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::end_session"))
    }

    async fn enrol_device(
        &self,
        device: NewDevice,
        account_key: String,
        audit: AuditEvent,
    ) -> Result<DeviceId, StoreError> {
        Err(not_yet("AccountStore::enrol_device"))
    }

    async fn device_principal(
        &self,
        token_digest: String,
    ) -> Result<Option<(Principal, Timestamp)>, StoreError> {
        Err(not_yet("AccountStore::device_principal"))
    }

    async fn touch_device(&self, id: DeviceId, at: Timestamp) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::touch_device"))
    }

    async fn devices(&self, site: SiteId) -> Result<Vec<DeviceRow>, StoreError> {
        Err(not_yet("AccountStore::devices"))
    }

    async fn revoke_device(
        &self,
        site: SiteId,
        id: DeviceId,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::revoke_device"))
    }

    async fn issue_api_token(
        &self,
        token: NewApiToken,
        audit: AuditEvent,
    ) -> Result<i64, StoreError> {
        Err(not_yet("AccountStore::issue_api_token"))
    }

    async fn api_token_principal(
        &self,
        token_digest: String,
    ) -> Result<Option<Principal>, StoreError> {
        Err(not_yet("AccountStore::api_token_principal"))
    }

    async fn api_tokens(&self, site: SiteId) -> Result<Vec<ApiTokenRow>, StoreError> {
        Err(not_yet("AccountStore::api_tokens"))
    }

    async fn revoke_api_token(
        &self,
        site: SiteId,
        id: i64,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::revoke_api_token"))
    }

    async fn record_audit(&self, event: AuditEvent) -> Result<(), StoreError> {
        Err(not_yet("AccountStore::record_audit"))
    }

    async fn audit_events(&self, site: SiteId, limit: usize) -> Result<Vec<AuditRow>, StoreError> {
        Err(not_yet("AccountStore::audit_events"))
    }
}

impl crate::accounts::audit::AuditTx for PgTx<'_> {
    fn insert_audit(&self, event: &AuditEvent) -> Result<(), crate::store::error::StoreError> {
        Err(not_yet("AuditTx::insert_audit"))
    }
}
