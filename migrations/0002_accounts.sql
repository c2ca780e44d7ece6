-- 0002: people and their roles per site, web sessions, enrolled phones,
-- integration tokens, sign-in throttling and the append-only audit trail.
-- Secrets are never stored: passwords and PINs as argon2id PHC strings, random
-- tokens and session ids as hex SHA-256 digests.

create table user_account (
    id             integer primary key autoincrement,
    name           text not null unique collate nocase,
    display_name   text not null,
    password_hash  text not null,
    pin_hash       text,
    created_at     integer not null
) strict;

create table user_role (
    user_id  integer not null references user_account(id),
    site_id  integer not null references site(id),
    role     text not null check (role in ('counter', 'supervisor', 'inventory_manager',
                                           'planner', 'admin')),
    primary key (user_id, site_id, role)
) strict, without rowid;
create index user_role_site on user_role(site_id, user_id);

create table web_session (
    id_hash       text primary key,
    user_id       integer not null references user_account(id),
    csrf_token    text not null,
    created_at    integer not null,
    last_seen_at  integer not null
) strict, without rowid;
create index web_session_user on web_session(user_id);

create table device (
    id            integer primary key autoincrement,
    user_id       integer not null references user_account(id),
    site_id       integer not null references site(id),
    name          text not null,
    token_hash    text not null unique,
    enrolled_at   integer not null,
    last_seen_at  integer not null,
    revoked_at    integer,
    revoked_by    text
) strict;
create index device_site on device(site_id, revoked_at);

create table api_token (
    id            integer primary key autoincrement,
    user_id       integer not null references user_account(id),
    site_id       integer not null references site(id),
    role          text not null check (role in ('counter', 'supervisor', 'inventory_manager',
                                                'planner', 'admin')),
    name          text not null,
    token_hash    text not null unique,
    created_at    integer not null,
    created_by    text not null,
    revoked_at    integer,
    revoked_by    text
) strict;
create index api_token_site on api_token(site_id, revoked_at);

-- One row per failed sign-in, keyed by account name or client address; rows
-- older than the throttling window are pruned when a new failure is written.
create table sign_in_failure (
    key  text not null,
    at   integer not null
) strict;
create index sign_in_failure_key on sign_in_failure(key, at);

-- The audit trail. `actor` is the user name, or 'cli' / 'system'; `detail` is
-- a JSON object saying what changed.
create table audit_event (
    id        integer primary key autoincrement,
    at        integer not null,
    site_id   integer references site(id),
    actor     text not null,
    actor_id  integer references user_account(id),
    action    text not null,
    subject   text not null default '',
    address   text not null default '',
    detail    text not null default '{}'
) strict;
create index audit_event_site on audit_event(site_id, id);

create trigger audit_event_no_update before update on audit_event
begin
    select raise(abort, 'the audit trail is append-only');
end;
create trigger audit_event_no_delete before delete on audit_event
begin
    select raise(abort, 'the audit trail is append-only');
end;
