//! What accounts need from storage. [`crate::store::Store`] includes this
//! trait; the SQL is in `store/sqlite/accounts.rs`. Every method that changes
//! rights or credentials takes the audit event and writes it in the same
//! transaction as the change.

use super::audit::{AuditEvent, AuditRow};
use super::secret::{CsrfToken, SecretHash};
use super::throttle::Failures;
use super::{DeviceId, Principal, Role, User, UserId, UserName};
use crate::master::SiteId;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use async_trait::async_trait;

/// A user to create.
#[derive(Debug, Clone)]
pub struct NewUser {
    pub name: UserName,
    pub display_name: String,
    pub password: SecretHash,
    pub pin: Option<SecretHash>,
    pub roles: Vec<(SiteId, Role)>,
}

/// What a sign-in checks against.
#[derive(Debug, Clone)]
pub struct StoredCredentials {
    pub user: User,
    pub password: SecretHash,
    pub pin: Option<SecretHash>,
}

/// Which of a user's secrets to replace.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SecretKind {
    Password,
    Pin,
}

/// A web session as stored.
#[derive(Debug, Clone)]
pub struct SessionState {
    pub principal: Principal,
    pub created_at: Timestamp,
    pub last_seen_at: Timestamp,
}

/// A session to start.
#[derive(Debug, Clone)]
pub struct NewSession {
    pub id_digest: String,
    pub user: User,
    pub csrf: CsrfToken,
    pub at: Timestamp,
}

/// A phone to enrol.
#[derive(Debug, Clone)]
pub struct NewDevice {
    pub user: User,
    pub site: SiteId,
    pub name: String,
    pub token_digest: String,
    pub at: Timestamp,
}

/// An enrolled phone, as the admin page lists it.
#[derive(Debug, Clone, serde::Serialize)]
pub struct DeviceRow {
    pub id: DeviceId,
    pub name: String,
    pub user: String,
    pub enrolled_at: Timestamp,
    pub last_seen_at: Timestamp,
    pub revoked_at: Option<Timestamp>,
    pub revoked_by: Option<String>,
}

/// An integration token to issue.
#[derive(Debug, Clone)]
pub struct NewApiToken {
    pub user: UserName,
    pub site: SiteId,
    pub role: Role,
    pub name: String,
    pub token_digest: String,
    pub at: Timestamp,
}

/// An integration token, as the admin page lists it.
#[derive(Debug, Clone)]
pub struct ApiTokenRow {
    pub id: i64,
    pub name: String,
    pub user: String,
    pub role: Role,
    pub created_at: Timestamp,
    pub created_by: String,
    pub revoked_at: Option<Timestamp>,
}

/// A user with their roles at one site and their recent failed sign-ins.
#[derive(Debug, Clone)]
pub struct SiteUser {
    pub user: User,
    pub roles: Vec<Role>,
    pub has_pin: bool,
    pub recent_failures: u32,
}

/// Storage operations of accounts, sessions, devices, tokens and the audit trail.
#[async_trait]
pub trait AccountStore: Send + Sync {
    /// Creates a user with roles; the name must be new.
    async fn create_user(&self, user: NewUser, audit: AuditEvent) -> Result<User, StoreError>;
    /// Finds a user by name.
    async fn user(&self, name: &UserName) -> Result<Option<User>, StoreError>;
    /// Reads what a sign-in checks against.
    async fn credentials(&self, name: &UserName) -> Result<Option<StoredCredentials>, StoreError>;
    /// Replaces a password (ending the user's web sessions) or a PIN.
    async fn set_secret(
        &self,
        name: &UserName,
        kind: SecretKind,
        hash: SecretHash,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;
    /// Replaces a user's roles at a site; the audit detail gets `before` and `after`.
    async fn set_roles(
        &self,
        name: &UserName,
        site: SiteId,
        roles: Vec<Role>,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;
    /// Returns the roles a user holds at a site.
    async fn roles_at(&self, user: UserId, site: SiteId) -> Result<Vec<Role>, StoreError>;
    /// Lists the users holding any role at a site; failures count from `since`.
    async fn site_users(&self, site: SiteId, since: Timestamp)
    -> Result<Vec<SiteUser>, StoreError>;

    /// Claims one sign-in attempt, atomically: prunes failures before
    /// `window_start`, counts each key's failures since then, and unless that
    /// locks the attempt, records it as a failure of both keys at `at` ahead
    /// of checking the secret — so parallel guesses cannot all slip under the
    /// limit. Returns the counts before this attempt.
    async fn claim_sign_in_attempt(
        &self,
        account_key: String,
        address_key: String,
        at: Timestamp,
        window_start: Timestamp,
    ) -> Result<Failures, StoreError>;
    /// Forgives a claimed attempt whose secret was right: clears the account's
    /// failures and the attempt's own row under the address.
    async fn sign_in_succeeded(
        &self,
        account_key: String,
        address_key: String,
        at: Timestamp,
    ) -> Result<(), StoreError>;
    /// Clears an account's failed sign-ins: the admin's lift of a lock.
    async fn unlock_account(
        &self,
        account_key: String,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;

    /// Starts a web session and clears the account's failures.
    async fn start_session(
        &self,
        session: NewSession,
        account_key: String,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;
    /// Reads a session and the principal behind it.
    async fn session(&self, id_digest: String) -> Result<Option<SessionState>, StoreError>;
    /// Moves a session's idle clock.
    async fn touch_session(&self, id_digest: String, at: Timestamp) -> Result<(), StoreError>;
    /// Deletes a session (sign-out or time-out), auditing it when given an event.
    async fn end_session(
        &self,
        id_digest: String,
        audit: Option<AuditEvent>,
    ) -> Result<(), StoreError>;

    /// Enrols a phone and clears the account's failures.
    async fn enrol_device(
        &self,
        device: NewDevice,
        account_key: String,
        audit: AuditEvent,
    ) -> Result<DeviceId, StoreError>;
    /// Reads the principal of a device token that is not revoked.
    async fn device_principal(
        &self,
        token_digest: String,
    ) -> Result<Option<(Principal, Timestamp)>, StoreError>;
    /// Moves a device's last-seen clock.
    async fn touch_device(&self, id: DeviceId, at: Timestamp) -> Result<(), StoreError>;
    /// Lists a site's devices, newest first.
    async fn devices(&self, site: SiteId) -> Result<Vec<DeviceRow>, StoreError>;
    /// Revokes a device of a site; `NotFound` if there is none to revoke.
    async fn revoke_device(
        &self,
        site: SiteId,
        id: DeviceId,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;

    /// Issues an integration token to a user who holds its role at the site.
    async fn issue_api_token(
        &self,
        token: NewApiToken,
        audit: AuditEvent,
    ) -> Result<i64, StoreError>;
    /// Reads the principal of an integration token that is not revoked.
    async fn api_token_principal(
        &self,
        token_digest: String,
    ) -> Result<Option<Principal>, StoreError>;
    /// Lists a site's integration tokens, newest first.
    async fn api_tokens(&self, site: SiteId) -> Result<Vec<ApiTokenRow>, StoreError>;
    /// Revokes an integration token of a site.
    async fn revoke_api_token(
        &self,
        site: SiteId,
        id: i64,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;

    /// Appends one event to the audit trail.
    async fn record_audit(&self, event: AuditEvent) -> Result<(), StoreError>;
    /// Reads a site's audit events (and those of no site), newest first.
    async fn audit_events(&self, site: SiteId, limit: usize) -> Result<Vec<AuditRow>, StoreError>;
}
