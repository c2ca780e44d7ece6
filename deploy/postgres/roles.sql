-- Roles for Cairn on PostgreSQL, least privilege (run as a superuser, once):
--   psql -h db.internal -U postgres -f deploy/postgres/roles.sql
-- Change the passwords (or use certificate or peer authentication); never commit them.

-- The application: owns its schema (it migrates it at start, under an advisory lock),
-- and nothing else on the server.
create role cairn_app login password 'change-me' nosuperuser nocreatedb nocreaterole noinherit;
create database cairn owner postgres;
\connect cairn
revoke all on database cairn from public;
revoke create on schema public from public;
create schema cairn authorization cairn_app;
alter role cairn_app set search_path = cairn;
grant connect on database cairn to cairn_app;

-- Reports and the ERP's readers: read only, never the ledger's writer.
create role cairn_read login password 'change-me' nosuperuser nocreatedb nocreaterole;
grant connect on database cairn to cairn_read;
grant usage on schema cairn to cairn_read;
alter default privileges for role cairn_app in schema cairn grant select on tables to cairn_read;
alter role cairn_read set search_path = cairn;

-- Backups with the engine's own tools (pg_basebackup, WAL archiving) and the streaming
-- replica use a replication role.
create role cairn_replica login replication password 'change-me';
