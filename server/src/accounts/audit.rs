//! The audit trail: an append-only record (the database refuses UPDATE and
//! DELETE) of who signed in, who changed whose rights, which phones were
//! enrolled or revoked, what was imported, and — from the review screens —
//! approvals and adjustments.

use super::UserId;
use crate::master::SiteId;
use crate::time::Timestamp;
use serde::Serialize;
use serde_json::Value;

/// Most audit rows one page shows.
pub const MAX_AUDIT_PAGE_ROWS: usize = 500;
/// Most audit rows one CSV export holds.
pub const MAX_AUDIT_EXPORT_ROWS: usize = 100_000;

/// Who did it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Actor {
    /// A signed-in person, a phone or an integration token acting for a user.
    User { id: UserId, name: String },
    /// Someone at the server's command line.
    Cli,
    /// Cairn itself (e.g. the demo generator).
    System,
    /// Not yet known: a failed sign-in names the account it tried in `subject`.
    Anonymous,
}

impl Actor {
    /// Returns the name stored in the `actor` column.
    pub fn name(&self) -> &str {
        match self {
            Actor::User { name, .. } => name,
            Actor::Cli => "cli",
            Actor::System => "system",
            Actor::Anonymous => "anonymous",
        }
    }

    /// Returns the user's id, if a user acted.
    pub fn user_id(&self) -> Option<UserId> {
        match self {
            Actor::User { id, .. } => Some(*id),
            _ => None,
        }
    }
}

/// What happened.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Action {
    SignIn,
    SignInFailed,
    SignInThrottled,
    SignOut,
    UserCreated,
    PasswordChanged,
    PinChanged,
    RolesChanged,
    AccountUnlocked,
    DeviceEnrolled,
    DeviceRevoked,
    ApiTokenIssued,
    ApiTokenRevoked,
    /// A CSV file imported at the command line.
    Import,
    /// A batch of master data or movements posted to the API.
    ApiBatch,
    /// A reviewer's decision on a count difference.
    Approval,
    /// A count adjustment posted to the ledger.
    Adjustment,
    /// A change to a site's count policy: tolerances, review limits, automatic
    /// adjustment, source timings or reason codes.
    CountPolicyChanged,
    /// A change to a site's time zone (and so to which instants its days span).
    SiteZoneChanged,
    /// A change to how a site sets its count intervals (`abc`, `risk`, `blend`) or
    /// to its class floors.
    IntervalRuleChanged,
}

impl Action {
    /// Returns the stored form.
    pub fn as_str(self) -> &'static str {
        match self {
            Action::SignIn => "sign_in",
            Action::SignInFailed => "sign_in_failed",
            Action::SignInThrottled => "sign_in_throttled",
            Action::SignOut => "sign_out",
            Action::UserCreated => "user_created",
            Action::PasswordChanged => "password_changed",
            Action::PinChanged => "pin_changed",
            Action::RolesChanged => "roles_changed",
            Action::AccountUnlocked => "account_unlocked",
            Action::DeviceEnrolled => "device_enrolled",
            Action::DeviceRevoked => "device_revoked",
            Action::ApiTokenIssued => "api_token_issued",
            Action::ApiTokenRevoked => "api_token_revoked",
            Action::Import => "import",
            Action::ApiBatch => "api_batch",
            Action::Approval => "approval",
            Action::Adjustment => "adjustment",
            Action::CountPolicyChanged => "count_policy_changed",
            Action::SiteZoneChanged => "site_zone_changed",
            Action::IntervalRuleChanged => "interval_rule_changed",
        }
    }
}

/// One event to append.
#[derive(Debug, Clone)]
pub struct AuditEvent {
    pub at: Timestamp,
    pub site: Option<SiteId>,
    pub actor: Actor,
    pub action: Action,
    /// What it was done to: a user name, a device id, a file name.
    pub subject: String,
    /// The client address, when a request caused it.
    pub address: String,
    /// What changed, as a JSON object (never a secret).
    pub detail: Value,
}

impl AuditEvent {
    /// Starts an event happening now.
    pub fn now(actor: Actor, action: Action, subject: impl Into<String>) -> Self {
        Self {
            at: Timestamp::now(),
            site: None,
            actor,
            action,
            subject: subject.into(),
            address: String::new(),
            detail: Value::Object(Default::default()),
        }
    }

    /// Names the site it happened at.
    pub fn at_site(mut self, site: SiteId) -> Self {
        self.site = Some(site);
        self
    }

    /// Names the client address.
    pub fn from_address(mut self, address: &str) -> Self {
        self.address = address.to_string();
        self
    }

    /// Says what changed.
    pub fn detail(mut self, detail: Value) -> Self {
        self.detail = detail;
        self
    }

    /// Adds what a batch wrote (`counts`, a JSON object) to the event's detail.
    pub fn with_counts(mut self, counts: Value) -> Self {
        match (&mut self.detail, counts) {
            (Value::Object(d), Value::Object(c)) => d.extend(c),
            (d, c) => *d = c,
        }
        self
    }
}

/// Writing an audit event inside a workflow's transaction.
pub trait AuditTx {
    fn insert_audit(&self, event: &AuditEvent) -> Result<(), crate::store::error::StoreError>;
}

/// Builds the audit event of an API batch that was written.
pub fn api_batch(by: &super::Principal, site: SiteId, what: &str, detail: Value) -> AuditEvent {
    AuditEvent::now(by.actor(), Action::ApiBatch, what)
        .at_site(site)
        .detail(detail)
}

/// Builds the audit event of a count-policy change: `part` names what changed
/// (`settings`, `sources`, `reason-codes`), `now` is the new value.
pub fn policy_change(
    by: &super::Principal,
    site: SiteId,
    part: &str,
    now: &impl serde::Serialize,
) -> AuditEvent {
    let value = serde_json::to_value(now).unwrap_or(Value::Null);
    AuditEvent::now(by.actor(), Action::CountPolicyChanged, part)
        .at_site(site)
        .detail(serde_json::json!({ "now": value }))
}

/// Records a change of a site's frequency policy: what it was and what it is now.
pub fn interval_rule_change(
    by: &super::Principal,
    site: SiteId,
    before: &impl serde::Serialize,
    now: &impl serde::Serialize,
) -> AuditEvent {
    let was = serde_json::to_value(before).unwrap_or(Value::Null);
    let now = serde_json::to_value(now).unwrap_or(Value::Null);
    AuditEvent::now(by.actor(), Action::IntervalRuleChanged, "frequency-policy")
        .at_site(site)
        .detail(serde_json::json!({ "was": was, "now": now }))
}

/// One stored event, as pages and the CSV export show it.
#[derive(Debug, Clone, Serialize)]
pub struct AuditRow {
    pub id: i64,
    pub at: Timestamp,
    pub site: String,
    pub actor: String,
    pub action: String,
    pub subject: String,
    pub address: String,
    pub detail: String,
}

/// Writes audit rows as CSV with a header line.
pub fn to_csv(rows: &[AuditRow]) -> anyhow::Result<Vec<u8>> {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record([
        "id", "at", "site", "actor", "action", "subject", "address", "detail",
    ])?;
    // Every column but `id` and `at` is text, and goes through the formula escape.
    use crate::input::csv_cell::text;
    for r in rows {
        w.write_record([
            r.id.to_string().as_str(),
            r.at.to_string().as_str(),
            &text(&r.site),
            &text(&r.actor),
            &text(&r.action),
            &text(&r.subject),
            &text(&r.address),
            &text(&r.detail),
        ])?;
    }
    w.into_inner()
        .map_err(|e| anyhow::anyhow!("cannot finish the audit CSV: {e}"))
}
