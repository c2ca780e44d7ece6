//! SQL of accounts: users and roles, sessions, devices, integration tokens,
//! sign-in failures and the audit trail.

use super::SqliteStore;
use crate::accounts::audit::{AuditEvent, AuditRow};
use crate::accounts::secret::{CsrfToken, SecretHash};
use crate::accounts::store::{
    AccountStore, ApiTokenRow, DeviceRow, NewApiToken, NewDevice, NewSession, NewUser, SecretKind,
    SessionState, SiteUser, StoredCredentials,
};
use crate::accounts::throttle::{Failures, account_key};
use crate::accounts::{Credential, DeviceId, Principal, Role, User, UserId, UserName};
use crate::master::SiteId;
use crate::store::StoreError;
use crate::time::Timestamp;
use async_trait::async_trait;
use rusqlite::{Connection, OptionalExtension, params};
use serde_json::json;

/// Appends an audit event inside the caller's transaction.
pub fn insert_audit(conn: &Connection, e: &AuditEvent) -> Result<(), StoreError> {
    conn.prepare_cached(
        "insert into audit_event (at, site_id, actor, actor_id, action, subject, address, detail)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
    )?
    .execute(params![
        e.at.0,
        e.site.map(|s| s.0),
        e.actor.name(),
        e.actor.user_id().map(|u| u.0),
        e.action.as_str(),
        e.subject,
        e.address,
        e.detail.to_string(),
    ])?;
    Ok(())
}

fn role(text: String) -> Result<Role, StoreError> {
    Role::parse(&text).map_err(|e| anyhow::anyhow!("stored role is invalid: {e}").into())
}

fn user_name(text: String) -> Result<UserName, StoreError> {
    UserName::parse(&text).map_err(|e| anyhow::anyhow!("stored user name is invalid: {e}").into())
}

fn user_by_name(conn: &Connection, name: &UserName) -> Result<Option<User>, StoreError> {
    conn.prepare_cached("select id, name, display_name from user_account where name = ?1")?
        .query_row([name.as_str()], |r| {
            Ok((r.get::<_, i64>(0)?, r.get(1)?, r.get(2)?))
        })
        .optional()?
        .map(|(id, name, display_name)| {
            Ok(User {
                id: UserId(id),
                name: user_name(name)?,
                display_name,
            })
        })
        .transpose()
}

fn existing_user(conn: &Connection, name: &UserName) -> Result<User, StoreError> {
    user_by_name(conn, name)?.ok_or_else(|| StoreError::NotFound(format!("no user '{name}'")))
}

fn user_by_id(conn: &Connection, id: i64) -> Result<User, StoreError> {
    let (name, display_name): (String, String) = conn
        .prepare_cached("select name, display_name from user_account where id = ?1")?
        .query_row([id], |r| Ok((r.get(0)?, r.get(1)?)))?;
    Ok(User {
        id: UserId(id),
        name: user_name(name)?,
        display_name,
    })
}

/// Returns every (site, role) a user holds.
fn roles_of(conn: &Connection, user: UserId) -> Result<Vec<(SiteId, Role)>, StoreError> {
    let mut stmt = conn
        .prepare_cached("select site_id, role from user_role where user_id = ?1 order by 1, 2")?;
    let rows = stmt.query_map([user.0], |r| Ok((r.get::<_, i64>(0)?, r.get(1)?)))?;
    let mut out = Vec::new();
    for row in rows {
        let (site, text) = row?;
        out.push((SiteId(site), role(text)?));
    }
    Ok(out)
}

fn roles_at(conn: &Connection, user: UserId, site: SiteId) -> Result<Vec<Role>, StoreError> {
    Ok(roles_of(conn, user)?
        .into_iter()
        .filter(|(s, _)| *s == site)
        .map(|(_, r)| r)
        .collect())
}

fn role_names(roles: &[Role]) -> Vec<&'static str> {
    roles.iter().map(|r| r.as_str()).collect()
}

fn count_since(conn: &Connection, key: &str, since: Timestamp) -> Result<u32, StoreError> {
    let n: i64 = conn
        .prepare_cached("select count(*) from sign_in_failure where key = ?1 and at >= ?2")?
        .query_row(params![key, since.0], |r| r.get(0))?;
    Ok(u32::try_from(n).unwrap_or(u32::MAX))
}

fn clear_failures(conn: &Connection, key: &str) -> Result<(), StoreError> {
    conn.prepare_cached("delete from sign_in_failure where key = ?1")?
        .execute([key])?;
    Ok(())
}

fn opt_ts(v: Option<i64>) -> Option<Timestamp> {
    v.map(Timestamp)
}

#[async_trait]
impl AccountStore for SqliteStore {
    async fn create_user(&self, user: NewUser, audit: AuditEvent) -> Result<User, StoreError> {
        self.write_tx(move |tx| {
            if user_by_name(tx, &user.name)?.is_some() {
                return Err(StoreError::Conflict(format!(
                    "user '{}' already exists",
                    user.name
                )));
            }
            tx.prepare_cached(
                "insert into user_account (name, display_name, password_hash, pin_hash, created_at)
                 values (?1, ?2, ?3, ?4, ?5)",
            )?
            .execute(params![
                user.name.as_str(),
                user.display_name,
                user.password.0,
                user.pin.as_ref().map(|p| p.0.clone()),
                audit.at.0
            ])?;
            let id = UserId(tx.last_insert_rowid());
            let mut insert = tx.prepare_cached(
                "insert or ignore into user_role (user_id, site_id, role) values (?1, ?2, ?3)",
            )?;
            for (site, role) in &user.roles {
                insert.execute(params![id.0, site.0, role.as_str()])?;
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
        let name = name.clone();
        self.readers.run(move |c| user_by_name(c, &name)).await
    }

    async fn credentials(&self, name: &UserName) -> Result<Option<StoredCredentials>, StoreError> {
        let name = name.clone();
        self.readers
            .run(move |c| {
                let Some(user) = user_by_name(c, &name)? else {
                    return Ok(None);
                };
                let (password, pin): (String, Option<String>) = c
                    .prepare_cached(
                        "select password_hash, pin_hash from user_account where id = ?1",
                    )?
                    .query_row([user.id.0], |r| Ok((r.get(0)?, r.get(1)?)))?;
                Ok(Some(StoredCredentials {
                    user,
                    password: SecretHash(password),
                    pin: pin.map(SecretHash),
                }))
            })
            .await
    }

    async fn set_secret(
        &self,
        name: &UserName,
        kind: SecretKind,
        hash: SecretHash,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        let name = name.clone();
        self.write_tx(move |tx| {
            let user = existing_user(tx, &name)?;
            let sql = match kind {
                SecretKind::Password => "update user_account set password_hash = ?1 where id = ?2",
                SecretKind::Pin => "update user_account set pin_hash = ?1 where id = ?2",
            };
            tx.prepare_cached(sql)?
                .execute(params![hash.0, user.id.0])?;
            if kind == SecretKind::Password {
                // A new password ends every open web session of the account.
                tx.prepare_cached("delete from web_session where user_id = ?1")?
                    .execute([user.id.0])?;
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
        self.write_tx(move |tx| {
            let user = existing_user(tx, &name)?;
            let before = roles_at(tx, user.id, site)?;
            tx.prepare_cached("delete from user_role where user_id = ?1 and site_id = ?2")?
                .execute(params![user.id.0, site.0])?;
            let mut insert = tx.prepare_cached(
                "insert or ignore into user_role (user_id, site_id, role) values (?1, ?2, ?3)",
            )?;
            for r in &roles {
                insert.execute(params![user.id.0, site.0, r.as_str()])?;
            }
            let mut audit = audit;
            audit.detail = json!({"before": role_names(&before), "after": role_names(&roles)});
            insert_audit(tx, &audit)
        })
        .await
    }

    async fn roles_at(&self, user: UserId, site: SiteId) -> Result<Vec<Role>, StoreError> {
        self.readers.run(move |c| roles_at(c, user, site)).await
    }

    async fn site_users(
        &self,
        site: SiteId,
        since: Timestamp,
    ) -> Result<Vec<SiteUser>, StoreError> {
        self.readers
            .run(move |c| {
                let mut stmt = c.prepare_cached(
                    "select u.id, u.pin_hash is not null, group_concat(r.role)
                       from user_account u join user_role r on r.user_id = u.id
                      where r.site_id = ?1
                      group by u.id order by u.name",
                )?;
                let rows = stmt
                    .query_map([site.0], |r| {
                        Ok((
                            r.get::<_, i64>(0)?,
                            r.get::<_, bool>(1)?,
                            r.get::<_, String>(2)?,
                        ))
                    })?
                    .collect::<rusqlite::Result<Vec<_>>>()?;
                let mut out = Vec::with_capacity(rows.len());
                for (id, has_pin, roles) in rows {
                    let user = user_by_id(c, id)?;
                    let mut roles = roles
                        .split(',')
                        .map(|r| role(r.to_string()))
                        .collect::<Result<Vec<_>, _>>()?;
                    roles.sort();
                    let recent_failures = count_since(c, &account_key(user.name.as_str()), since)?;
                    out.push(SiteUser {
                        user,
                        roles,
                        has_pin,
                        recent_failures,
                    });
                }
                Ok(out)
            })
            .await
    }

    async fn claim_sign_in_attempt(
        &self,
        account_key: String,
        address_key: String,
        at: Timestamp,
        window_start: Timestamp,
    ) -> Result<Failures, StoreError> {
        self.write_tx(move |tx| {
            tx.prepare_cached("delete from sign_in_failure where at < ?1")?
                .execute([window_start.0])?;
            let failures = Failures {
                account: count_since(tx, &account_key, window_start)?,
                address: count_since(tx, &address_key, window_start)?,
            };
            if !failures.locked() {
                let mut insert =
                    tx.prepare_cached("insert into sign_in_failure (key, at) values (?1, ?2)")?;
                insert.execute(params![account_key, at.0])?;
                insert.execute(params![address_key, at.0])?;
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
        self.write_tx(move |tx| {
            clear_failures(tx, &account_key)?;
            tx.prepare_cached(
                "delete from sign_in_failure where rowid =
                   (select rowid from sign_in_failure where key = ?1 and at = ?2 limit 1)",
            )?
            .execute(params![address_key, at.0])?;
            Ok(())
        })
        .await
    }

    async fn unlock_account(
        &self,
        account_key: String,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            clear_failures(tx, &account_key)?;
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
        self.write_tx(move |tx| {
            tx.prepare_cached(
                "insert into web_session (id_hash, user_id, csrf_token, created_at, last_seen_at)
                 values (?1, ?2, ?3, ?4, ?4)",
            )?
            .execute(params![
                session.id_digest,
                session.user.id.0,
                session.csrf.0,
                session.at.0
            ])?;
            clear_failures(tx, &account_key)?;
            insert_audit(tx, &audit)
        })
        .await
    }

    async fn session(&self, id_digest: String) -> Result<Option<SessionState>, StoreError> {
        self.readers
            .run(move |c| {
                let row: Option<(i64, String, i64, i64)> = c
                    .prepare_cached(
                        "select user_id, csrf_token, created_at, last_seen_at
                           from web_session where id_hash = ?1",
                    )?
                    .query_row([&id_digest], |r| {
                        Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?))
                    })
                    .optional()?;
                let Some((user_id, csrf, created_at, last_seen_at)) = row else {
                    return Ok(None);
                };
                let user = user_by_id(c, user_id)?;
                let roles = roles_of(c, user.id)?;
                Ok(Some(SessionState {
                    principal: Principal {
                        user,
                        credential: Credential::Session {
                            csrf: CsrfToken(csrf),
                        },
                        roles,
                    },
                    created_at: Timestamp(created_at),
                    last_seen_at: Timestamp(last_seen_at),
                }))
            })
            .await
    }

    async fn touch_session(&self, id_digest: String, at: Timestamp) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            tx.prepare_cached("update web_session set last_seen_at = ?1 where id_hash = ?2")?
                .execute(params![at.0, id_digest])?;
            Ok(())
        })
        .await
    }

    async fn end_session(
        &self,
        id_digest: String,
        audit: Option<AuditEvent>,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            tx.prepare_cached("delete from web_session where id_hash = ?1")?
                .execute([id_digest])?;
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
        self.write_tx(move |tx| {
            tx.prepare_cached(
                "insert into device (user_id, site_id, name, token_hash, enrolled_at, last_seen_at)
                 values (?1, ?2, ?3, ?4, ?5, ?5)",
            )?
            .execute(params![
                device.user.id.0,
                device.site.0,
                device.name,
                device.token_digest,
                device.at.0
            ])?;
            let id = DeviceId(tx.last_insert_rowid());
            clear_failures(tx, &account_key)?;
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
        self.readers
            .run(move |c| {
                let row: Option<(i64, i64, i64, i64)> = c
                    .prepare_cached(
                        "select id, user_id, site_id, last_seen_at from device
                          where token_hash = ?1 and revoked_at is null",
                    )?
                    .query_row([&token_digest], |r| {
                        Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?))
                    })
                    .optional()?;
                let Some((id, user_id, site, last_seen)) = row else {
                    return Ok(None);
                };
                let user = user_by_id(c, user_id)?;
                let site = SiteId(site);
                // A phone carries counter rights only, and only while its user still counts there.
                let roles = roles_at(c, user.id, site)?
                    .into_iter()
                    .filter(|r| *r == Role::Counter)
                    .map(|r| (site, r))
                    .collect();
                Ok(Some((
                    Principal {
                        user,
                        credential: Credential::Device {
                            id: DeviceId(id),
                            site,
                        },
                        roles,
                    },
                    Timestamp(last_seen),
                )))
            })
            .await
    }

    async fn touch_device(&self, id: DeviceId, at: Timestamp) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            tx.prepare_cached("update device set last_seen_at = ?1 where id = ?2")?
                .execute(params![at.0, id.0])?;
            Ok(())
        })
        .await
    }

    async fn devices(&self, site: SiteId) -> Result<Vec<DeviceRow>, StoreError> {
        self.readers
            .run(move |c| {
                let mut stmt = c.prepare_cached(
                    "select d.id, d.name, u.name, d.enrolled_at, d.last_seen_at, d.revoked_at, d.revoked_by
                       from device d join user_account u on u.id = d.user_id
                      where d.site_id = ?1 order by d.id desc",
                )?;
                let rows = stmt.query_map([site.0], |r| {
                    Ok(DeviceRow {
                        id: DeviceId(r.get(0)?),
                        name: r.get(1)?,
                        user: r.get(2)?,
                        enrolled_at: Timestamp(r.get(3)?),
                        last_seen_at: Timestamp(r.get(4)?),
                        revoked_at: opt_ts(r.get(5)?),
                        revoked_by: r.get(6)?,
                    })
                })?;
                Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
            })
            .await
    }

    async fn revoke_device(
        &self,
        site: SiteId,
        id: DeviceId,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            let n = tx
                .prepare_cached(
                    "update device set revoked_at = ?1, revoked_by = ?2
                      where id = ?3 and site_id = ?4 and revoked_at is null",
                )?
                .execute(params![audit.at.0, audit.actor.name(), id.0, site.0])?;
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
        self.write_tx(move |tx| {
            let user = existing_user(tx, &token.user)?;
            if !roles_at(tx, user.id, token.site)?.contains(&token.role) {
                return Err(StoreError::Conflict(format!(
                    "user '{}' does not hold the role {} at this site",
                    user.name, token.role
                )));
            }
            tx.prepare_cached(
                "insert into api_token (user_id, site_id, role, name, token_hash, created_at, created_by)
                 values (?1, ?2, ?3, ?4, ?5, ?6, ?7)",
            )?
            .execute(params![
                user.id.0,
                token.site.0,
                token.role.as_str(),
                token.name,
                token.token_digest,
                token.at.0,
                audit.actor.name()
            ])?;
            let id = tx.last_insert_rowid();
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
        self.readers
            .run(move |c| {
                let row: Option<(i64, i64, i64, String)> = c
                    .prepare_cached(
                        "select id, user_id, site_id, role from api_token
                          where token_hash = ?1 and revoked_at is null",
                    )?
                    .query_row([&token_digest], |r| {
                        Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?))
                    })
                    .optional()?;
                let Some((id, user_id, site, granted)) = row else {
                    return Ok(None);
                };
                let granted = role(granted)?;
                let user = user_by_id(c, user_id)?;
                let site = SiteId(site);
                // The token's one role, and only while its user still holds it there.
                let roles = roles_at(c, user.id, site)?
                    .into_iter()
                    .filter(|r| *r == granted)
                    .map(|r| (site, r))
                    .collect();
                Ok(Some(Principal {
                    user,
                    credential: Credential::ApiToken { id, site },
                    roles,
                }))
            })
            .await
    }

    async fn api_tokens(&self, site: SiteId) -> Result<Vec<ApiTokenRow>, StoreError> {
        self.readers
            .run(move |c| {
                let mut stmt = c.prepare_cached(
                    "select t.id, t.name, u.name, t.role, t.created_at, t.created_by, t.revoked_at
                       from api_token t join user_account u on u.id = t.user_id
                      where t.site_id = ?1 order by t.id desc",
                )?;
                let rows = stmt
                    .query_map([site.0], |r| {
                        Ok((
                            r.get::<_, i64>(0)?,
                            r.get::<_, String>(1)?,
                            r.get::<_, String>(2)?,
                            r.get::<_, String>(3)?,
                            r.get::<_, i64>(4)?,
                            r.get::<_, String>(5)?,
                            r.get::<_, Option<i64>>(6)?,
                        ))
                    })?
                    .collect::<rusqlite::Result<Vec<_>>>()?;
                rows.into_iter()
                    .map(|(id, name, user, r, created_at, created_by, revoked_at)| {
                        Ok(ApiTokenRow {
                            id,
                            name,
                            user,
                            role: role(r)?,
                            created_at: Timestamp(created_at),
                            created_by,
                            revoked_at: opt_ts(revoked_at),
                        })
                    })
                    .collect()
            })
            .await
    }

    async fn revoke_api_token(
        &self,
        site: SiteId,
        id: i64,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            let n = tx
                .prepare_cached(
                    "update api_token set revoked_at = ?1, revoked_by = ?2
                      where id = ?3 and site_id = ?4 and revoked_at is null",
                )?
                .execute(params![audit.at.0, audit.actor.name(), id, site.0])?;
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
        self.write_tx(move |tx| insert_audit(tx, &event)).await
    }

    async fn audit_events(&self, site: SiteId, limit: usize) -> Result<Vec<AuditRow>, StoreError> {
        self.readers
            .run(move |c| {
                let mut stmt = c.prepare_cached(
                    "select a.id, a.at, coalesce(s.code, ''), a.actor, a.action, a.subject, a.address, a.detail
                       from audit_event a left join site s on s.id = a.site_id
                      where a.site_id = ?1 or a.site_id is null
                      order by a.id desc limit ?2",
                )?;
                let rows = stmt.query_map(params![site.0, limit as i64], |r| {
                    Ok(AuditRow {
                        id: r.get(0)?,
                        at: Timestamp(r.get(1)?),
                        site: r.get(2)?,
                        actor: r.get(3)?,
                        action: r.get(4)?,
                        subject: r.get(5)?,
                        address: r.get(6)?,
                        detail: r.get(7)?,
                    })
                })?;
                Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
            })
            .await
    }
}
