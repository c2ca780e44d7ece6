-- 0001: sites, master data and the append-only movement ledger.
-- Instants are integer milliseconds since the Unix epoch (UTC); quantities are
-- integers in the item's base unit; money is integer minor units.

create table site (
    id          integer primary key,
    code        text not null unique,
    name        text not null,
    time_zone   text not null default 'UTC',
    created_at  integer not null
) strict;

create table zone (
    id        integer primary key,
    site_id   integer not null references site(id),
    code      text not null,
    name      text not null default '',
    walk_seq  integer not null default 0,
    unique (site_id, code)
) strict;

create table bin (
    id        integer primary key,
    site_id   integer not null references site(id),
    zone_id   integer not null references zone(id),
    code      text not null,
    aisle     integer not null check (aisle between 0 and 999),
    bay       integer not null check (bay between 0 and 999),
    level     integer not null check (level between 0 and 99),
    side      text not null check (side in ('L', 'R', '')),
    walk_seq  integer not null default 0,
    unique (site_id, code)
) strict;
create index bin_zone on bin(zone_id, aisle, bay, level);

create table item (
    id               integer primary key,
    site_id          integer not null references site(id),
    sku              text not null,
    description      text not null,
    base_unit        text not null,
    unit_cost_minor  integer not null check (unit_cost_minor >= 0),
    lot_tracked      integer not null check (lot_tracked in (0, 1)),
    item_group       text not null default '',
    unique (site_id, sku)
) strict;

create table pack (
    id       integer primary key,
    site_id  integer not null references site(id),
    item_id  integer not null references item(id),
    gtin     text not null check (length(gtin) = 14),
    level    text not null check (level in ('each', 'inner', 'case', 'pallet')),
    units    integer not null check (units > 0),
    unique (site_id, gtin)
) strict;
create index pack_item on pack(item_id);

create table lot (
    id       integer primary key,
    item_id  integer not null references item(id),
    code     text not null,
    expiry   text,
    unique (item_id, code)
) strict;

-- The ledger. `id` is the order in which the server learnt of each movement and
-- so serves as the watermark of anything computed from the ledger.
create table movement (
    id           integer primary key,
    uid          text not null unique,
    site_id      integer not null references site(id),
    bin_id       integer not null references bin(id),
    item_id      integer not null references item(id),
    lot          text not null default '',
    qty          integer not null check (qty <> 0),
    kind         text not null check (kind in ('receipt', 'putaway', 'pick', 'transfer',
                                               'adjustment', 'count_adjustment', 'return')),
    event_at     integer not null,
    recorded_at  integer not null,
    source       text not null,
    doc_ref      text not null default '',
    actor        text not null default '',
    reverses     integer references movement(id)
) strict;
-- Covering index: a point-in-time balance is one range of this index.
create index movement_key_time on movement(bin_id, item_id, lot, event_at, qty);
create index movement_bin_time on movement(bin_id, event_at);
create index movement_item_time on movement(item_id, event_at);

create trigger movement_no_update before update on movement
begin
    select raise(abort, 'the movement ledger is append-only: post a compensating movement instead');
end;
create trigger movement_no_delete before delete on movement
begin
    select raise(abort, 'the movement ledger is append-only: post a compensating movement instead');
end;

-- Current balance per key, kept in the same transaction as the ledger.
-- `moves_since_snap` and `snap_at` steer the snapshots below.
create table balance (
    bin_id            integer not null references bin(id),
    item_id           integer not null references item(id),
    lot               text not null,
    qty               integer not null,
    last_event_at     integer not null,
    moves_since_snap  integer not null,
    snap_at           integer,
    primary key (bin_id, item_id, lot)
) strict, without rowid;
create index balance_item on balance(item_id);

-- Balance of a busy key as of `at` (sum of deltas with event_at <= at), so a
-- point-in-time look-up reads at most a few hundred index entries.
create table balance_snapshot (
    bin_id   integer not null,
    item_id  integer not null,
    lot      text not null,
    at       integer not null,
    qty      integer not null,
    primary key (bin_id, item_id, lot, at)
) strict, without rowid;

-- Demo sites only: what is really on the shelf, so simulated counts find the
-- record errors the generator injected. Real sites never write here.
create table demo_shelf (
    bin_id   integer not null references bin(id),
    item_id  integer not null references item(id),
    lot      text not null,
    qty      integer not null,
    primary key (bin_id, item_id, lot)
) strict, without rowid;
