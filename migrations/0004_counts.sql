-- 0004: what phones send. Every sync event as received (the facts, append-only),
-- each device's clock correction, and the counts they make: a pass of one counter
-- over one bin, and its lines. Instants are server time in ms; `device_at` keeps
-- the phone's own clock reading beside the corrected time.

-- The newest clock sample of each device: server time = device time + offset_ms,
-- give or take uncertainty_ms at the moment of the sample.
create table device_clock (
    device_id       integer primary key references device(id),
    offset_ms       integer not null,
    uncertainty_ms  integer not null check (uncertainty_ms >= 0),
    sampled_at      integer not null
) strict;

-- One counter's pass over one bin (a "count"). `uid` is the id the phone gave
-- the pass (the id of its bin_opened event); any event of the pass may create it,
-- because events can arrive in any order.
create table count_pass (
    id              integer primary key,
    uid             text not null unique,
    site_id         integer not null references site(id),
    bin_id          integer not null references bin(id),
    task_id         integer references count_task(id),
    user_id         integer not null references user_account(id),
    device_id       integer references device(id),
    -- First scan and bin done, corrected; done_at is null until the bin is done.
    first_at        integer not null,
    done_at         integer,
    -- The widest clock uncertainty of any of its events.
    uncertainty_ms  integer not null check (uncertainty_ms >= 0),
    empty           integer not null default 0 check (empty in (0, 1)),
    -- The task's run was held by someone else when the pass reached the server.
    reassigned      integer not null default 0 check (reassigned in (0, 1)),
    received_at     integer not null
) strict;
create index count_pass_bin on count_pass(bin_id, first_at);
create index count_pass_task on count_pass(task_id);

create table count_line (
    id              integer primary key,
    uid             text not null unique,
    pass_id         integer not null references count_pass(id),
    item_id         integer not null references item(id),
    lot             text not null default '',
    expiry          text,
    qty             integer not null check (qty > 0),
    packs           integer not null check (packs > 0),
    gtin            text,
    entry           text not null check (entry in ('scan', 'camera', 'keypad')),
    at              integer not null,
    device_at       integer not null,
    uncertainty_ms  integer not null check (uncertainty_ms >= 0),
    -- The bin was not expected to hold this item when the line arrived.
    found           integer not null default 0 check (found in (0, 1))
) strict;
create index count_line_pass on count_line(pass_id);

-- An undone line, by the line's id: it may arrive before the line itself.
create table count_line_undo (
    line_uid   text primary key,
    undo_uid   text not null unique,
    pass_uid   text not null,
    at         integer not null
) strict, without rowid;

-- Every accepted event exactly as it was understood (canonical JSON), so a resend
-- is recognised and a different event under a known id is refused.
create table sync_event (
    id              integer primary key,
    uid             text not null unique,
    site_id         integer not null references site(id),
    user_id         integer not null references user_account(id),
    device_id       integer references device(id),
    pass_uid        text not null,
    kind            text not null,
    body            text not null,
    device_at       integer not null,
    at              integer not null,
    uncertainty_ms  integer not null,
    -- Notes given with the acceptance (comma-separated), repeated on a resend.
    flags           text not null default '',
    received_at     integer not null
) strict;

create trigger sync_event_no_update before update on sync_event
begin
    select raise(abort, 'sync events are facts: they are never changed');
end;
create trigger sync_event_no_delete before delete on sync_event
begin
    select raise(abort, 'sync events are facts: they are never removed');
end;
create trigger count_line_no_update before update on count_line
begin
    select raise(abort, 'count lines are facts: undo them with an undo event');
end;
create trigger count_line_no_delete before delete on count_line
begin
    select raise(abort, 'count lines are facts: undo them with an undo event');
end;
