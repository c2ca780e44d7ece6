//! Accounts over PostgreSQL: users and roles, sessions, devices, integration tokens,
//! sign-in throttling and the audit trail. User names compare without case through
//! `lower(name)` (a unique index holds it), as SQLite's `collate nocase` does.
//!
//! Writes that change who may act at a site (roles, phones, tokens) hold that site's lock;
//! writes of account-wide rows (users, secrets, sessions, sign-in failures) hold none, so a
//! sign-in never waits behind a site's long write.

use super::tx::PgTx;
use super::{PgStore, is_unique_violation, row_one, row_opt, rows};
use crate::accounts::audit::{AuditEvent, AuditRow, AuditTx};
use crate::accounts::secret::{CsrfToken, SecretHash};
use crate::accounts::store::{
    AccountStore, ApiTokenRow, DeviceRow, NewApiToken, NewDevice, NewSession, NewUser, SecretKind,
    SessionState, SiteUser, StoredCredentials,
};
use crate::accounts::throttle::{Failures, account_key};
use crate::accounts::{Credential, DeviceId, Principal, Role, User, UserId, UserName};
use crate::master::SiteId;
use crate::store::{StoreError, WriteScope};
use crate::time::Timestamp;
use async_trait::async_trait;
use deadpool_postgres::Client;
use serde_json::json;
use tokio_postgres::Row;

/// The first key of the advisory lock a sign-in attempt takes on its throttling keys (the
/// second is the key's hash), so two attempts at once cannot both slip under the limit.
const THROTTLE_LOCK_SPACE: i32 = 0x4361_6974;

const INSERT_AUDIT: &str =
    "insert into audit_event (at, site_id, actor, actor_id, action, subject, address, detail)
     values ($1, $2, $3, $4, $5, $6, $7, $8)";
const USER_BY_NAME: &str =
    "select id, name, display_name from user_account where lower(name) = lower($1)";
const USER_BY_ID: &str = "select id, name, display_name from user_account where id = $1";
const ROLES_OF: &str = "select site_id, role from user_role where user_id = $1 order by 1, 2";
const COUNT_SINCE: &str = "select count(*) from sign_in_failure where key = $1 and at >= $2";
const CLEAR_FAILURES: &str = "delete from sign_in_failure where key = $1";
const INSERT_ROLE: &str =
    "insert into user_role (user_id, site_id, role) values ($1, $2, $3) on conflict do nothing";

/// Appends an audit event inside the caller's transaction.
pub fn insert_audit(tx: &PgTx<'_>, e: &AuditEvent) -> Result<(), StoreError> {
    tx.execute(
        INSERT_AUDIT,
        &[
            &e.at.0,
            &e.site.map(|s| s.0),
            &e.actor.name(),
            &e.actor.user_id().map(|u| u.0),
            &e.action.as_str(),
            &e.subject,
            &e.address,
            &e.detail.to_string(),
        ],
    )?;
    Ok(())
}

impl AuditTx for PgTx<'_> {
    fn insert_audit(&self, event: &AuditEvent) -> Result<(), StoreError> {
        insert_audit(self, event)
    }
}

fn role(text: String) -> Result<Role, StoreError> {
    Role::parse(&text).map_err(|e| anyhow::anyhow!("stored role is invalid: {e}").into())
}

fn user_of(r: &Row) -> Result<User, StoreError> {
    let name: String = r.get(1);
    Ok(User {
        id: UserId(r.get(0)),
        name: UserName::parse(&name)
            .map_err(|e| anyhow::anyhow!("stored user name is invalid: {e}"))?,
        display_name: r.get(2),
    })
}

fn roles_from(rows: Vec<Row>) -> Result<Vec<(SiteId, Role)>, StoreError> {
    rows.into_iter()
        .map(|r| Ok((SiteId(r.get(0)), role(r.get(1))?)))
        .collect()
}

fn only_at(roles: Vec<(SiteId, Role)>, site: SiteId) -> Vec<Role> {
    roles
        .into_iter()
        .filter(|(s, _)| *s == site)
        .map(|(_, r)| r)
        .collect()
}

fn role_names(roles: &[Role]) -> Vec<&'static str> {
    roles.iter().map(|r| r.as_str()).collect()
}

fn failures(n: i64) -> u32 {
    u32::try_from(n).unwrap_or(u32::MAX)
}

fn opt_ts(v: Option<i64>) -> Option<Timestamp> {
    v.map(Timestamp)
}

// In a write transaction.

fn tx_user_by_name(tx: &PgTx<'_>, name: &UserName) -> Result<Option<User>, StoreError> {
    tx.query_opt(USER_BY_NAME, &[&name.as_str()])?
        .map(|r| user_of(&r))
        .transpose()
}

fn tx_existing_user(tx: &PgTx<'_>, name: &UserName) -> Result<User, StoreError> {
    tx_user_by_name(tx, name)?.ok_or_else(|| StoreError::NotFound(format!("no user '{name}'")))
}

fn tx_roles_at(tx: &PgTx<'_>, user: UserId, site: SiteId) -> Result<Vec<Role>, StoreError> {
    Ok(only_at(roles_from(tx.query(ROLES_OF, &[&user.0])?)?, site))
}

fn tx_count_since(tx: &PgTx<'_>, key: &str, since: Timestamp) -> Result<u32, StoreError> {
    Ok(failures(
        tx.query_one(COUNT_SINCE, &[&key, &since.0])?.get(0),
    ))
}

fn tx_clear_failures(tx: &PgTx<'_>, key: &str) -> Result<(), StoreError> {
    tx.execute(CLEAR_FAILURES, &[&key])?;
    Ok(())
}

// On a read connection.

async fn user_by_name(c: &Client, name: &UserName) -> Result<Option<User>, StoreError> {
    row_opt(c, USER_BY_NAME, &[&name.as_str()])
        .await?
        .map(|r| user_of(&r))
        .transpose()
}

async fn user_by_id(c: &Client, id: i64) -> Result<User, StoreError> {
    user_of(&row_one(c, USER_BY_ID, &[&id]).await?)
}

async fn roles_of(c: &Client, user: UserId) -> Result<Vec<(SiteId, Role)>, StoreError> {
    roles_from(rows(c, ROLES_OF, &[&user.0]).await?)
}

async fn roles_at(c: &Client, user: UserId, site: SiteId) -> Result<Vec<Role>, StoreError> {
    Ok(only_at(roles_of(c, user).await?, site))
}

#[async_trait]
impl AccountStore for PgStore {
    async fn create_user(&self, user: NewUser, audit: AuditEvent) -> Result<User, StoreError> {
        self.write_tx_unlocked(move |tx| {
            let taken = || StoreError::Conflict(format!("user '{}' already exists", user.name));
            if tx_user_by_name(tx, &user.name)?.is_some() {
                return Err(taken());
            }
            let id = match tx.query_one(
                "insert into user_account (name, display_name, password_hash, pin_hash, created_at)
                 values ($1, $2, $3, $4, $5) returning id",
                &[
                    &user.name.as_str(),
                    &user.display_name,
                    &user.password.0,
                    &user.pin.as_ref().map(|p| p.0.as_str()),
                    &audit.at.0,
                ],
            ) {
                Ok(r) => UserId(r.get(0)),
                // Another server made the same name since the look-up.
                Err(e) if is_unique_violation(&e) => return Err(taken()),
                Err(e) => return Err(e.into()),
            };
            for (site, role) in &user.roles {
                tx.execute(INSERT_ROLE, &[&id.0, &site.0, &role.as_str()])?;
            }
            let roles: Vec<_> = user
                .roles
                .iter()
                .map(|(s, r)| json!({"site_id": s.0, "role": r.as_str()}))
                .collect();
            let mut audit = audit;
            audit.detail = json!({"display_name": user.display_name, "roles": roles, "pin": user.pin.is_some()});
            insert_audit(tx, &audit)?;
            Ok(User {
                id,
                name: user.name,
                display_name: user.display_name,
            })
        })
        .await
    }

    async fn user(&self, name: &UserName) -> Result<Option<User>, StoreError> {
        user_by_name(&*self.client().await?, name).await
    }

    async fn credentials(&self, name: &UserName) -> Result<Option<StoredCredentials>, StoreError> {
        let c = self.client().await?;
        let Some(user) = user_by_name(&c, name).await? else {
            return Ok(None);
        };
        let r = row_one(
            &c,
            "select password_hash, pin_hash from user_account where id = $1",
            &[&user.id.0],
        )
        .await?;
        Ok(Some(StoredCredentials {
            user,
            password: SecretHash(r.get(0)),
            pin: r.get::<_, Option<String>>(1).map(SecretHash),
        }))
    }

    async fn set_secret(
        &self,
        name: &UserName,
        kind: SecretKind,
        hash: SecretHash,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        let name = name.clone();
        self.write_tx_unlocked(move |tx| {
            let user = tx_existing_user(tx, &name)?;
            let sql = match kind {
                SecretKind::Password => "update user_account set password_hash = $1 where id = $2",
                SecretKind::Pin => "update user_account set pin_hash = $1 where id = $2",
            };
            tx.execute(sql, &[&hash.0, &user.id.0])?;
            if kind == SecretKind::Password {
                // A new password ends every open web session of the account.
                tx.execute("delete from web_session where user_id = $1", &[&user.id.0])?;
            }
            insert_audit(tx, &audit)
        })
        .await
    }

    async fn set_roles(
        &self,
        name: &UserName,
        site: SiteId,
        roles: Vec<Role>,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        let name = name.clone();
        self.write_tx(WriteScope::Site(site), move |tx| {
            let user = tx_existing_user(tx, &name)?;
            let before = tx_roles_at(tx, user.id, site)?;
            tx.execute(
                "delete from user_role where user_id = $1 and site_id = $2",
                &[&user.id.0, &site.0],
            )?;
            for r in &roles {
                tx.execute(INSERT_ROLE, &[&user.id.0, &site.0, &r.as_str()])?;
            }
            let mut audit = audit;
            audit.detail = json!({"before": role_names(&before), "after": role_names(&roles)});
            insert_audit(tx, &audit)
        })
        .await
    }

    async fn roles_at(&self, user: UserId, site: SiteId) -> Result<Vec<Role>, StoreError> {
        roles_at(&*self.client().await?, user, site).await
    }

    async fn site_users(
        &self,
        site: SiteId,
        since: Timestamp,
    ) -> Result<Vec<SiteUser>, StoreError> {
        let c = self.client().await?;
        let found = rows(
            &c,
            "select u.id, u.name, u.display_name, u.pin_hash is not null, string_agg(r.role, ',')
               from user_account u join user_role r on r.user_id = u.id
              where r.site_id = $1
              group by u.id order by lower(u.name) collate \"C\"",
            &[&site.0],
        )
        .await?;
        let mut out = Vec::with_capacity(found.len());
        for r in found {
            let user = user_of(&r)?;
            let mut roles = r
                .get::<_, String>(4)
                .split(',')
                .map(|x| role(x.to_string()))
                .collect::<Result<Vec<_>, _>>()?;
            roles.sort();
            let key = account_key(user.name.as_str());
            let recent_failures =
                failures(row_one(&c, COUNT_SINCE, &[&key, &since.0]).await?.get(0));
            out.push(SiteUser {
                user,
                roles,
                has_pin: r.get(3),
                recent_failures,
            });
        }
        Ok(out)
    }

    async fn claim_sign_in_attempt(
        &self,
        account_key: String,
        address_key: String,
        at: Timestamp,
        window_start: Timestamp,
    ) -> Result<Failures, StoreError> {
        self.write_tx_unlocked(move |tx| {
            // In key order, so two attempts never wait on each other in a circle.
            let mut keys = [account_key.as_str(), address_key.as_str()];
            keys.sort();
            for k in keys {
                tx.execute(
                    "select pg_advisory_xact_lock($1, hashtext($2))",
                    &[&THROTTLE_LOCK_SPACE, &k],
                )?;
            }
            tx.execute(
                "delete from sign_in_failure where at < $1",
                &[&window_start.0],
            )?;
            let failures = Failures {
                account: tx_count_since(tx, &account_key, window_start)?,
                address: tx_count_since(tx, &address_key, window_start)?,
            };
            if !failures.locked() {
                let insert = "insert into sign_in_failure (key, at) values ($1, $2)";
                tx.execute(insert, &[&account_key, &at.0])?;
                tx.execute(insert, &[&address_key, &at.0])?;
            }
            Ok(failures)
        })
        .await
    }

    async fn sign_in_succeeded(
        &self,
        account_key: String,
        address_key: String,
        at: Timestamp,
    ) -> Result<(), StoreError> {
        self.write_tx_unlocked(move |tx| {
            tx_clear_failures(tx, &account_key)?;
            tx.execute(
                "delete from sign_in_failure where ctid =
                   (select ctid from sign_in_failure where key = $1 and at = $2 limit 1)",
                &[&address_key, &at.0],
            )?;
            Ok(())
        })
        .await
    }

    async fn unlock_account(
        &self,
        account_key: String,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx_unlocked(move |tx| {
            tx_clear_failures(tx, &account_key)?;
            insert_audit(tx, &audit)
        })
        .await
    }

    async fn start_session(
        &self,
        session: NewSession,
        account_key: String,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx_unlocked(move |tx| {
            tx.execute(
                "insert into web_session (id_hash, user_id, csrf_token, created_at, last_seen_at)
                 values ($1, $2, $3, $4, $4)",
                &[
                    &session.id_digest,
                    &session.user.id.0,
                    &session.csrf.0,
                    &session.at.0,
                ],
            )?;
            tx_clear_failures(tx, &account_key)?;
            insert_audit(tx, &audit)
        })
        .await
    }

    async fn session(&self, id_digest: String) -> Result<Option<SessionState>, StoreError> {
        let c = self.client().await?;
        let Some(r) = row_opt(
            &c,
            "select user_id, csrf_token, created_at, last_seen_at
               from web_session where id_hash = $1",
            &[&id_digest],
        )
        .await?
        else {
            return Ok(None);
        };
        let user = user_by_id(&c, r.get(0)).await?;
        let roles = roles_of(&c, user.id).await?;
        Ok(Some(SessionState {
            principal: Principal {
                user,
                credential: Credential::Session {
                    csrf: CsrfToken(r.get(1)),
                },
                roles,
            },
            created_at: Timestamp(r.get(2)),
            last_seen_at: Timestamp(r.get(3)),
        }))
    }

    async fn touch_session(&self, id_digest: String, at: Timestamp) -> Result<(), StoreError> {
        self.write_tx_unlocked(move |tx| {
            tx.execute(
                "update web_session set last_seen_at = $1 where id_hash = $2",
                &[&at.0, &id_digest],
            )?;
            Ok(())
        })
        .await
    }

    async fn end_session(
        &self,
        id_digest: String,
        audit: Option<AuditEvent>,
    ) -> Result<(), StoreError> {
        self.write_tx_unlocked(move |tx| {
            tx.execute("delete from web_session where id_hash = $1", &[&id_digest])?;
            match audit {
                Some(a) => insert_audit(tx, &a),
                None => Ok(()),
            }
        })
        .await
    }

    async fn enrol_device(
        &self,
        device: NewDevice,
        account_key: String,
        audit: AuditEvent,
    ) -> Result<DeviceId, StoreError> {
        self.write_tx(WriteScope::Site(device.site), move |tx| {
            let id = DeviceId(
                tx.query_one(
                    "insert into device (user_id, site_id, name, token_hash, enrolled_at, last_seen_at)
                     values ($1, $2, $3, $4, $5, $5) returning id",
                    &[
                        &device.user.id.0,
                        &device.site.0,
                        &device.name,
                        &device.token_digest,
                        &device.at.0,
                    ],
                )?
                .get(0),
            );
            tx_clear_failures(tx, &account_key)?;
            let mut audit = audit;
            audit.subject = format!("device {}", id.0);
            audit.detail =
                json!({"device_id": id.0, "name": device.name, "user": device.user.name.as_str()});
            insert_audit(tx, &audit)?;
            Ok(id)
        })
        .await
    }

    async fn device_principal(
        &self,
        token_digest: String,
    ) -> Result<Option<(Principal, Timestamp)>, StoreError> {
        let c = self.client().await?;
        let Some(r) = row_opt(
            &c,
            "select id, user_id, site_id, last_seen_at from device
              where token_hash = $1 and revoked_at is null",
            &[&token_digest],
        )
        .await?
        else {
            return Ok(None);
        };
        let user = user_by_id(&c, r.get(1)).await?;
        let site = SiteId(r.get(2));
        // A phone carries counter rights only, and only while its user still counts there.
        let roles = roles_at(&c, user.id, site)
            .await?
            .into_iter()
            .filter(|r| *r == Role::Counter)
            .map(|r| (site, r))
            .collect();
        Ok(Some((
            Principal {
                user,
                credential: Credential::Device {
                    id: DeviceId(r.get(0)),
                    site,
                },
                roles,
            },
            Timestamp(r.get(3)),
        )))
    }

    async fn touch_device(&self, id: DeviceId, at: Timestamp) -> Result<(), StoreError> {
        self.write_tx_unlocked(move |tx| {
            tx.execute(
                "update device set last_seen_at = $1 where id = $2",
                &[&at.0, &id.0],
            )?;
            Ok(())
        })
        .await
    }

    async fn devices(&self, site: SiteId) -> Result<Vec<DeviceRow>, StoreError> {
        let c = self.client().await?;
        Ok(rows(
            &c,
            "select d.id, d.name, u.name, d.enrolled_at, d.last_seen_at, d.revoked_at, d.revoked_by
               from device d join user_account u on u.id = d.user_id
              where d.site_id = $1 order by d.id desc",
            &[&site.0],
        )
        .await?
        .into_iter()
        .map(|r| DeviceRow {
            id: DeviceId(r.get(0)),
            name: r.get(1),
            user: r.get(2),
            enrolled_at: Timestamp(r.get(3)),
            last_seen_at: Timestamp(r.get(4)),
            revoked_at: opt_ts(r.get(5)),
            revoked_by: r.get(6),
        })
        .collect())
    }

    async fn revoke_device(
        &self,
        site: SiteId,
        id: DeviceId,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(WriteScope::Site(site), move |tx| {
            let n = tx.execute(
                "update device set revoked_at = $1, revoked_by = $2
                  where id = $3 and site_id = $4 and revoked_at is null",
                &[&audit.at.0, &audit.actor.name(), &id.0, &site.0],
            )?;
            if n == 0 {
                return Err(StoreError::NotFound(format!(
                    "no device {} to revoke at this site",
                    id.0
                )));
            }
            insert_audit(tx, &audit)
        })
        .await
    }

    async fn issue_api_token(
        &self,
        token: NewApiToken,
        audit: AuditEvent,
    ) -> Result<i64, StoreError> {
        self.write_tx(WriteScope::Site(token.site), move |tx| {
            let user = tx_existing_user(tx, &token.user)?;
            if !tx_roles_at(tx, user.id, token.site)?.contains(&token.role) {
                return Err(StoreError::Conflict(format!(
                    "user '{}' does not hold the role {} at this site",
                    user.name, token.role
                )));
            }
            let id: i64 = tx
                .query_one(
                    "insert into api_token (user_id, site_id, role, name, token_hash, created_at, created_by)
                     values ($1, $2, $3, $4, $5, $6, $7) returning id",
                    &[
                        &user.id.0,
                        &token.site.0,
                        &token.role.as_str(),
                        &token.name,
                        &token.token_digest,
                        &token.at.0,
                        &audit.actor.name(),
                    ],
                )?
                .get(0);
            let mut audit = audit;
            audit.subject = format!("token {id}");
            audit.detail = json!({"token_id": id, "name": token.name, "user": user.name.as_str(), "role": token.role.as_str()});
            insert_audit(tx, &audit)?;
            Ok(id)
        })
        .await
    }

    async fn api_token_principal(
        &self,
        token_digest: String,
    ) -> Result<Option<Principal>, StoreError> {
        let c = self.client().await?;
        let Some(r) = row_opt(
            &c,
            "select id, user_id, site_id, role from api_token
              where token_hash = $1 and revoked_at is null",
            &[&token_digest],
        )
        .await?
        else {
            return Ok(None);
        };
        let granted = role(r.get(3))?;
        let user = user_by_id(&c, r.get(1)).await?;
        let site = SiteId(r.get(2));
        // The token's one role, and only while its user still holds it there.
        let roles = roles_at(&c, user.id, site)
            .await?
            .into_iter()
            .filter(|r| *r == granted)
            .map(|r| (site, r))
            .collect();
        Ok(Some(Principal {
            user,
            credential: Credential::ApiToken { id: r.get(0), site },
            roles,
        }))
    }

    async fn api_tokens(&self, site: SiteId) -> Result<Vec<ApiTokenRow>, StoreError> {
        let c = self.client().await?;
        rows(
            &c,
            "select t.id, t.name, u.name, t.role, t.created_at, t.created_by, t.revoked_at
               from api_token t join user_account u on u.id = t.user_id
              where t.site_id = $1 order by t.id desc",
            &[&site.0],
        )
        .await?
        .into_iter()
        .map(|r| {
            Ok(ApiTokenRow {
                id: r.get(0),
                name: r.get(1),
                user: r.get(2),
                role: role(r.get(3))?,
                created_at: Timestamp(r.get(4)),
                created_by: r.get(5),
                revoked_at: opt_ts(r.get(6)),
            })
        })
        .collect()
    }

    async fn revoke_api_token(
        &self,
        site: SiteId,
        id: i64,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(WriteScope::Site(site), move |tx| {
            let n = tx.execute(
                "update api_token set revoked_at = $1, revoked_by = $2
                  where id = $3 and site_id = $4 and revoked_at is null",
                &[&audit.at.0, &audit.actor.name(), &id, &site.0],
            )?;
            if n == 0 {
                return Err(StoreError::NotFound(format!(
                    "no token {id} to revoke at this site"
                )));
            }
            insert_audit(tx, &audit)
        })
        .await
    }

    async fn record_audit(&self, event: AuditEvent) -> Result<(), StoreError> {
        self.write_tx_unlocked(move |tx| insert_audit(tx, &event))
            .await
    }

    async fn audit_events(&self, site: SiteId, limit: usize) -> Result<Vec<AuditRow>, StoreError> {
        let c = self.client().await?;
        let limit = i64::try_from(limit).unwrap_or(i64::MAX);
        Ok(rows(
            &c,
            "select a.id, a.at, coalesce(s.code, ''), a.actor, a.action, a.subject, a.address, a.detail
               from audit_event a left join site s on s.id = a.site_id
              where a.site_id = $1 or a.site_id is null
              order by a.id desc limit $2",
            &[&site.0, &limit],
        )
        .await?
        .into_iter()
        .map(|r| AuditRow {
            id: r.get(0),
            at: Timestamp(r.get(1)),
            site: r.get(2),
            actor: r.get(3),
            action: r.get(4),
            subject: r.get(5),
            address: r.get(6),
            detail: r.get(7),
        })
        .collect())
    }
}
