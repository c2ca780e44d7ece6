-- 0009: one recount visit per bin (DESIGN §5). The out-of-tolerance keys of one count pass
-- give one recount task for the bin, and the task lists every result it re-checks; a
-- supervisor count likewise. A recount no longer needed (its keys became hits after a
-- re-net) is withdrawn: kept with the reason, off every list.

-- What a recount or supervisor-count task re-checks: one row per first result (the row
-- current when the key was sent; later rows of the key are found by pass, item and lot).
-- `count_task.recount_of` stays as the mark of a task that re-checks something, and names
-- the first of its results.
create table count_task_recheck (
    task_id    integer not null references count_task(id),
    result_id  integer not null references count_result(id),
    primary key (task_id, result_id)
) strict, without rowid;
create index count_task_recheck_result on count_task_recheck(result_id, task_id);

-- A supervisor count (sent after a recount agreed with neither side) rather than a recount.
alter table count_task add column supervisor integer not null default 0
    check (supervisor in (0, 1));
-- A withdrawn task is kept (a pass made against it stays as evidence) but leaves every
-- list: when, and why.
alter table count_task add column withdrawn_at integer;
alter table count_task add column withdrawn_reason text not null default '';

insert into count_task_recheck (task_id, result_id)
    select id, recount_of from count_task where recount_of is not null;

-- A supervisor count was the second task sent for a key of a pass.
update count_task set supervisor = 1
where recount_of is not null
  and exists (select 1 from count_result r cross join count_result r2 cross join count_task t2
              where r.id = count_task.recount_of and r2.pass_id = r.pass_id
                and r2.item_id = r.item_id and r2.lot = r.lot
                and t2.recount_of = r2.id and t2.id < count_task.id);

-- Open tasks of one pass and kind that no phone has begun (no pass points at them) become
-- one: the oldest takes the others' keys, the others are withdrawn as merged into it.
-- Done tasks, and tasks a phone began, stay as they are.
create temp table recount_merge as
    with open_task as (
        select t.id, r.pass_id, t.supervisor
        from count_task t join count_result r on r.id = t.recount_of
        where t.status <> 'done'
          and not exists (select 1 from count_pass p where p.task_id = t.id)
    )
    select o.id as task_id,
           (select min(o2.id) from open_task o2
            where o2.pass_id = o.pass_id and o2.supervisor = o.supervisor) as into_id
    from open_task o;
delete from recount_merge where task_id = into_id;

insert into count_task_recheck (task_id, result_id)
    select m.into_id, k.result_id
    from recount_merge m join count_task_recheck k on k.task_id = m.task_id;

update count_task
set withdrawn_at = cast(strftime('%s', 'now') as integer) * 1000,
    withdrawn_reason = 'merged into task '
        || (select m.into_id from recount_merge m where m.task_id = count_task.id)
        || ': one recount per bin'
where id in (select task_id from recount_merge);

-- The task that took the keys says what it re-checks, in the words netting uses.
update count_task
set detail = (select case when count_task.supervisor = 1 then 'supervisor count of '
                          else 'recount of ' end
                     || group_concat(i.sku || case when r.lot <> '' then ' lot ' || r.lot
                                                   else '' end, ', ')
                     || ' (results ' || group_concat(r.id, ', ') || ')'
              from count_task_recheck k join count_result r on r.id = k.result_id
                   join item i on i.id = r.item_id
              where k.task_id = count_task.id)
where id in (select into_id from recount_merge);

-- Phones holding those lists fetch them again.
update count_list set version = version + 1
where id in (select t.list_id from count_task t
             where t.id in (select task_id from recount_merge)
                or t.id in (select into_id from recount_merge));

drop table recount_merge;

