//! Sites and master data over PostgreSQL: sites, zones, bins, items, packs and the demo
//! shelf. A batch of master data is written in its site's write transaction, all or
//! nothing, with its audit event.

use super::accounts::insert_audit;
use super::tx::PgTx;
use super::{PgStore, is_unique_violation, narrow, row_one, row_opt, rows};
use crate::accounts::audit::AuditEvent;
use crate::batch::RowError;
use crate::master::codes::{BinCode, Sku, ZoneCode};
use crate::master::read::{
    BinQuery, BinRow, ClassFilter, ItemQuery, ItemRow, LotQuery, LotRow, PackQuery, PackRow,
    SkuPackRow, ZoneQuery, ZoneRow,
};
use crate::master::{
    Bin, NewBin, NewItem, NewPack, NewSite, Side, Site, SiteCode, SiteCounts, SiteId,
};
use crate::planning::phone::{ItemBrief, PackBrief};
use crate::store::{Progress, ShelfRow, StoreError, WriteScope};
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use std::collections::HashMap;
use tokio_postgres::Row;

const SITE_COLUMNS: &str = "select id, code, name, time_zone from site";

fn to_site(r: &Row) -> Result<Site, StoreError> {
    let code: String = r.get(1);
    let code =
        SiteCode::parse(&code).map_err(|e| anyhow::anyhow!("stored site code is invalid: {e}"))?;
    Ok(Site {
        id: SiteId(r.get(0)),
        code,
        name: r.get(2),
        time_zone: stored_zone(r.get(3)),
    })
}

/// Reads a stored zone name; a name the tz database does not know keeps UTC days (see the
/// SQLite store's `stored_zone`).
pub(super) fn stored_zone(name: &str) -> SiteZone {
    SiteZone::parse(name).unwrap_or(SiteZone::UTC)
}

/// Reads a site's zone inside a write (UTC for a stored name the tz database does not know).
pub fn site_zone(tx: &PgTx<'_>, site: SiteId) -> Result<SiteZone, StoreError> {
    let r = tx.query_one("select time_zone from site where id = $1", &[&site.0])?;
    Ok(stored_zone(r.get(0)))
}

/// Writes a batch's audit event in the batch's own transaction, with the counts it wrote.
fn audit_in(
    tx: &PgTx<'_>,
    audit: Option<AuditEvent>,
    counts: serde_json::Value,
) -> Result<(), StoreError> {
    match audit {
        Some(event) => insert_audit(tx, &event.with_counts(counts)),
        None => Ok(()),
    }
}

/// See [`crate::store::Store::ping_writer`]: a transaction that must be able to write (a
/// standby refuses to give it a transaction id), rolled back, so it writes nothing.
pub async fn ping_writer(store: &PgStore) -> Result<(), StoreError> {
    let mut c = store.client().await?;
    let tx = c.transaction().await?;
    tx.query_one("select pg_current_xact_id()::text", &[])
        .await?;
    tx.rollback().await?;
    Ok(())
}

/// See [`crate::store::Store::create_site`]. A new site has no lock of its own to take yet;
/// its code's unique index refuses a second one made at the same time.
pub async fn create_site(store: &PgStore, site: NewSite) -> Result<Site, StoreError> {
    store
        .write_tx_unlocked(move |tx| {
            let taken = || StoreError::Conflict(format!("site '{}' already exists", site.code));
            if tx
                .query_opt("select 1 from site where code = $1", &[&site.code.as_str()])?
                .is_some()
            {
                return Err(taken());
            }
            let id: i64 = match tx.query_one(
                "insert into site (code, name, time_zone, created_at) values ($1, $2, $3, $4)
                 returning id",
                &[
                    &site.code.as_str(),
                    &site.name,
                    &site.time_zone.name(),
                    &Timestamp::now().0,
                ],
            ) {
                Ok(r) => r.get(0),
                Err(e) if is_unique_violation(&e) => return Err(taken()),
                Err(e) => return Err(e.into()),
            };
            Ok(Site {
                id: SiteId(id),
                code: site.code.clone(),
                name: site.name.clone(),
                time_zone: site.time_zone,
            })
        })
        .await
}

/// See [`crate::store::Store::set_site_zone`].
pub async fn set_site_zone(
    store: &PgStore,
    site: SiteId,
    zone: SiteZone,
    audit: AuditEvent,
) -> Result<String, StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            let was: String = tx
                .query_opt("select time_zone from site where id = $1", &[&site.0])?
                .ok_or_else(|| StoreError::NotFound(format!("no site {}", site.0)))?
                .get(0);
            tx.execute(
                "update site set time_zone = $2 where id = $1",
                &[&site.0, &zone.name()],
            )?;
            let mut audit = audit;
            audit.detail = serde_json::json!({"was": was, "now": zone.name()});
            insert_audit(tx, &audit)?;
            Ok(was)
        })
        .await
}

/// See [`crate::store::Store::site`].
pub async fn site(store: &PgStore, code: &SiteCode) -> Result<Option<Site>, StoreError> {
    let c = store.client().await?;
    row_opt(
        &c,
        &format!("{SITE_COLUMNS} where code = $1"),
        &[&code.as_str()],
    )
    .await?
    .map(|r| to_site(&r))
    .transpose()
}

/// See [`crate::store::Store::sites`].
pub async fn sites(store: &PgStore) -> Result<Vec<Site>, StoreError> {
    let c = store.client().await?;
    rows(
        &c,
        &format!("{SITE_COLUMNS} order by code collate \"C\""),
        &[],
    )
    .await?
    .iter()
    .map(to_site)
    .collect()
}

/// See [`crate::store::Store::site_counts`].
pub async fn site_counts(store: &PgStore, site: SiteId) -> Result<SiteCounts, StoreError> {
    let c = store.client().await?;
    let r = row_one(
        &c,
        "select (select count(*) from zone where site_id = $1),
                (select count(*) from bin where site_id = $1),
                (select count(*) from item where site_id = $1),
                (select count(*) from pack where site_id = $1),
                (select count(*) from movement where site_id = $1),
                (select coalesce(max(id), 0) from movement)",
        &[&site.0],
    )
    .await?;
    Ok(SiteCounts {
        zones: narrow(r.get(0), "zone count")?,
        bins: narrow(r.get(1), "bin count")?,
        items: narrow(r.get(2), "item count")?,
        packs: narrow(r.get(3), "pack count")?,
        movements: narrow(r.get(4), "movement count")?,
        watermark: r.get(5),
    })
}

/// See [`crate::store::Store::bins`].
pub async fn bins(
    store: &PgStore,
    site: SiteId,
    zone: Option<ZoneCode>,
) -> Result<Vec<Bin>, StoreError> {
    let c = store.client().await?;
    // Two sides of one place tie on the walk's order; the code settles it (SQLite reads
    // the bins through its (site, code) index, so it meets them in that order too).
    let found = rows(
        &c,
        "select b.code, z.code, b.aisle, b.bay, b.level, b.side, b.walk_seq
         from bin b join zone z on z.id = b.zone_id
         where b.site_id = $1 and ($2::text is null or z.code = $2)
         order by z.walk_seq, z.code collate \"C\", b.aisle, b.bay, b.level, b.code collate \"C\"",
        &[&site.0, &zone.as_ref().map(ZoneCode::as_str)],
    )
    .await?;
    let bad = |e: crate::master::codes::CodeError| anyhow::anyhow!("stored bin is invalid: {e}");
    found
        .iter()
        .map(|r| {
            Ok(Bin {
                code: BinCode::parse(r.get(0)).map_err(bad)?,
                zone: ZoneCode::parse(r.get(1)).map_err(bad)?,
                aisle: narrow(r.get(2), "aisle")?,
                bay: narrow(r.get(3), "bay")?,
                level: narrow(r.get(4), "level")?,
                side: Side::from_stored(r.get(5)),
                walk_seq: r.get(6),
            })
        })
        .collect()
}

/// See [`crate::store::Store::zone_rows`]: a page of a site's zones by code.
pub async fn zone_rows(
    store: &PgStore,
    site: SiteId,
    q: ZoneQuery,
) -> Result<Vec<ZoneRow>, StoreError> {
    let c = store.client().await?;
    rows(
        &c,
        "select z.code, z.walk_seq, (select count(*) from bin b where b.zone_id = z.id)
         from zone z
         where z.site_id = $1 and ($2::text is null or z.code collate \"C\" > $2)
         order by z.code collate \"C\"
         limit $3",
        &[&site.0, &q.after, &(q.take as i64)],
    )
    .await?
    .iter()
    .map(|r| {
        Ok(ZoneRow {
            code: r.try_get(0)?,
            walk_seq: r.try_get(1)?,
            bins: narrow(r.try_get(2)?, "bin count")?,
        })
    })
    .collect()
}

/// See [`crate::store::Store::bin_rows`]: a page of a site's bins by code.
pub async fn bin_rows(
    store: &PgStore,
    site: SiteId,
    q: BinQuery,
) -> Result<Vec<BinRow>, StoreError> {
    let c = store.client().await?;
    rows(
        &c,
        "select b.code, z.code, b.aisle, b.bay, b.level, b.side, b.walk_seq
         from bin b join zone z on z.id = b.zone_id
         where b.site_id = $1 and ($2::text is null or z.code = $2)
           and ($3::bigint is null or b.aisle = $3)
           and ($4::text is null or b.code collate \"C\" > $4)
         order by b.code collate \"C\"
         limit $5",
        &[
            &site.0,
            &q.zone.as_ref().map(ZoneCode::as_str),
            &q.aisle.map(i64::from),
            &q.after,
            &(q.take as i64),
        ],
    )
    .await?
    .iter()
    .map(|r| {
        Ok(BinRow {
            code: r.try_get(0)?,
            zone: r.try_get(1)?,
            aisle: narrow(r.try_get(2)?, "aisle")?,
            bay: narrow(r.try_get(3)?, "bay")?,
            level: narrow(r.try_get(4)?, "level")?,
            side: r.try_get(5)?,
            walk_seq: r.try_get(6)?,
        })
    })
    .collect()
}

/// See [`crate::store::Store::item_rows`]: a page of a site's items by SKU, each with its
/// packs and current class.
pub async fn item_rows(
    store: &PgStore,
    site: SiteId,
    q: ItemQuery,
) -> Result<Vec<ItemRow>, StoreError> {
    let c = store.client().await?;
    let found = rows(
        &c,
        "select * from (
             select i.sku, i.description, i.base_unit, i.unit_cost_minor, i.lot_tracked,
                    i.item_group,
                    (select ic.class from item_class ic where ic.item_id = i.id
                     order by ic.run_id desc limit 1) as class
             from item i
             where i.site_id = $1 and ($2::text is null or i.sku = $2)
               and ($3::text is null or substr(i.sku, 1, length($3)) = $3)
               and ($4::text is null or i.item_group = $4)
               and ($6::text is null or i.sku collate \"C\" > $6)
         ) x
         where ($5::text is null or coalesce(x.class, '') = $5)
         order by x.sku collate \"C\"
         limit $7",
        &[
            &site.0,
            &q.sku.as_ref().map(Sku::as_str),
            &q.sku_prefix,
            &q.group,
            &q.class.map(ClassFilter::stored),
            &q.after,
            &(q.take as i64),
        ],
    )
    .await?;
    let mut items = found
        .iter()
        .map(|r| {
            Ok(ItemRow {
                sku: r.try_get(0)?,
                description: r.try_get(1)?,
                base_unit: r.try_get(2)?,
                unit_cost_minor: r.try_get(3)?,
                lot_tracked: r.try_get(4)?,
                group: r.try_get(5)?,
                packs: Vec::new(),
                class: r.try_get(6)?,
            })
        })
        .collect::<Result<Vec<_>, StoreError>>()?;
    // One read for the packs of the whole page, not one per item.
    let skus: Vec<&str> = items.iter().map(|i| i.sku.as_str()).collect();
    let mut packs: HashMap<String, Vec<PackRow>> = HashMap::new();
    for r in rows(
        &c,
        "select i.sku, p.gtin, p.level, p.units
         from pack p join item i on i.id = p.item_id
         where i.site_id = $1 and i.sku = any($2)
         order by i.sku, p.units, p.gtin collate \"C\"",
        &[&site.0, &skus],
    )
    .await?
    {
        packs.entry(r.try_get(0)?).or_default().push(PackRow {
            gtin: r.try_get(1)?,
            level: r.try_get(2)?,
            units: narrow(r.try_get(3)?, "units")?,
        });
    }
    for item in &mut items {
        item.packs = packs.remove(&item.sku).unwrap_or_default();
    }
    Ok(items)
}

/// See [`crate::store::Store::lot_rows`]: a page of a site's lots by SKU, then lot code.
pub async fn lot_rows(
    store: &PgStore,
    site: SiteId,
    q: LotQuery,
) -> Result<Vec<LotRow>, StoreError> {
    let (after_sku, after_lot) = q.after.unzip();
    let c = store.client().await?;
    rows(
        &c,
        "select i.sku, l.code, l.expiry
         from lot l join item i on i.id = l.item_id
         where i.site_id = $1 and ($2::text is null or i.sku = $2)
           and ($3::text is null or i.sku collate \"C\" > $3
                or (i.sku = $3 and l.code collate \"C\" > $4::text))
         order by i.sku collate \"C\", l.code collate \"C\"
         limit $5",
        &[
            &site.0,
            &q.sku.as_ref().map(Sku::as_str),
            &after_sku,
            &after_lot,
            &(q.take as i64),
        ],
    )
    .await?
    .iter()
    .map(|r| {
        Ok(LotRow {
            sku: r.try_get(0)?,
            lot: r.try_get(1)?,
            expiry: r.try_get(2)?,
        })
    })
    .collect()
}

/// See [`crate::store::Store::pack_rows`]: a page of a site's packs by SKU, then GTIN.
pub async fn pack_rows(
    store: &PgStore,
    site: SiteId,
    q: PackQuery,
) -> Result<Vec<SkuPackRow>, StoreError> {
    let (after_sku, after_gtin) = q.after.unzip();
    let c = store.client().await?;
    rows(
        &c,
        "select i.sku, p.gtin, p.level, p.units
         from pack p join item i on i.id = p.item_id
         where p.site_id = $1 and ($2::text is null or i.sku = $2)
           and ($3::text is null or i.sku collate \"C\" > $3
                or (i.sku = $3 and p.gtin collate \"C\" > $4::text))
         order by i.sku collate \"C\", p.gtin collate \"C\"
         limit $5",
        &[
            &site.0,
            &q.sku.as_ref().map(Sku::as_str),
            &after_sku,
            &after_gtin,
            &(q.take as i64),
        ],
    )
    .await?
    .iter()
    .map(|r| {
        Ok(SkuPackRow {
            sku: r.try_get(0)?,
            gtin: r.try_get(1)?,
            level: r.try_get(2)?,
            units: narrow(r.try_get(3)?, "units")?,
        })
    })
    .collect()
}

/// Lists, per named bin, the items with a non-zero balance there and their packs
/// (no quantities: this is what a blind counter may be told).
pub async fn bin_contents(
    store: &PgStore,
    site: SiteId,
    bins: Vec<BinCode>,
) -> Result<HashMap<String, Vec<ItemBrief>>, StoreError> {
    let c = store.client().await?;
    let mut out = HashMap::new();
    for bin in bins {
        let items = rows(
            &c,
            "select distinct i.id, i.sku collate \"C\", i.description, i.base_unit, i.lot_tracked
             from bin b join balance k on k.bin_id = b.id join item i on i.id = k.item_id
             where b.site_id = $1 and b.code = $2 and k.qty <> 0
             order by 2",
            &[&site.0, &bin.as_str()],
        )
        .await?;
        let mut briefs = Vec::with_capacity(items.len());
        for r in items {
            let id: i64 = r.get(0);
            briefs.push(ItemBrief {
                sku: r.get(1),
                description: r.get(2),
                base_unit: r.get(3),
                lot_tracked: r.get(4),
                packs: packs_of(&c, id).await?,
            });
        }
        out.insert(bin.as_str().to_string(), briefs);
    }
    Ok(out)
}

/// Lists an item's packs, smallest first.
pub async fn packs_of(
    c: &deadpool_postgres::Client,
    item: i64,
) -> Result<Vec<PackBrief>, StoreError> {
    rows(
        c,
        "select gtin, level, units from pack where item_id = $1 order by units",
        &[&item],
    )
    .await?
    .iter()
    .map(|p| {
        Ok(PackBrief {
            gtin: p.get(0),
            level: p.get(1),
            units: narrow(p.get(2), "pack units")?,
        })
    })
    .collect()
}

/// Refuses a batch that names the same key twice; `key` gives each row's key.
fn refuse_repeats<T>(
    rows: &[T],
    field: &str,
    what: &str,
    key: impl Fn(&T) -> &str,
) -> Result<(), StoreError> {
    let mut first: HashMap<&str, usize> = HashMap::new();
    let mut errors = Vec::new();
    for (i, r) in rows.iter().enumerate() {
        if let Some(j) = first.insert(key(r), i) {
            errors.push(RowError::new(
                i,
                field,
                format!(
                    "{what} '{}' appears twice in this batch (first at row {j})",
                    key(r)
                ),
            ));
        }
    }
    if errors.is_empty() {
        Ok(())
    } else {
        Err(StoreError::Rejected(errors))
    }
}

/// See [`crate::store::Store::put_bins`]: zones are made in order of first appearance.
pub async fn put_bins(
    store: &PgStore,
    site: SiteId,
    rows: Vec<NewBin>,
    progress: Progress,
    audit: Option<AuditEvent>,
) -> Result<usize, StoreError> {
    refuse_repeats(&rows, "code", "bin", |b| b.code.as_str())?;
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            let mut zones: HashMap<String, i64> = HashMap::new();
            for b in &rows {
                let zone_id = match zones.get(b.zone.as_str()) {
                    Some(z) => *z,
                    None => {
                        let z: i64 = match tx.query_opt(
                            "select id from zone where site_id = $1 and code = $2",
                            &[&site.0, &b.zone.as_str()],
                        )? {
                            Some(r) => r.get(0),
                            None => tx
                                .query_one(
                                    "insert into zone (site_id, code, walk_seq)
                                     values ($1, $2, (select coalesce(max(walk_seq), 0) + 1
                                                        from zone where site_id = $1))
                                     returning id",
                                    &[&site.0, &b.zone.as_str()],
                                )?
                                .get(0),
                        };
                        zones.insert(b.zone.as_str().to_string(), z);
                        z
                    }
                };
                tx.execute(
                    "insert into bin (site_id, zone_id, code, aisle, bay, level, side, walk_seq)
                     values ($1, $2, $3, $4, $5, $6, $7, $8)
                     on conflict (site_id, code) do update set zone_id = excluded.zone_id,
                         aisle = excluded.aisle, bay = excluded.bay, level = excluded.level,
                         side = excluded.side, walk_seq = excluded.walk_seq",
                    &[
                        &site.0,
                        &zone_id,
                        &b.code.as_str(),
                        &i64::from(b.aisle),
                        &i64::from(b.bay),
                        &i64::from(b.level),
                        &b.side.as_str(),
                        &b.walk_seq,
                    ],
                )?;
                progress.tick(1);
            }
            let written = rows.len();
            audit_in(tx, audit, serde_json::json!({"written": written}))?;
            Ok(written)
        })
        .await
}

/// See [`crate::store::Store::put_items`].
pub async fn put_items(
    store: &PgStore,
    site: SiteId,
    rows: Vec<NewItem>,
    progress: Progress,
    audit: Option<AuditEvent>,
) -> Result<usize, StoreError> {
    refuse_repeats(&rows, "sku", "SKU", |r| r.sku.as_str())?;
    let repeated = crate::master::repeated_pack_gtins(&rows);
    if !repeated.is_empty() {
        return Err(StoreError::Rejected(repeated));
    }
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            for r in &rows {
                tx.execute(
                    "insert into item (site_id, sku, description, base_unit, unit_cost_minor,
                                       lot_tracked, item_group)
                     values ($1, $2, $3, $4, $5, $6, $7)
                     on conflict (site_id, sku) do update set description = excluded.description,
                         base_unit = excluded.base_unit, unit_cost_minor = excluded.unit_cost_minor,
                         lot_tracked = excluded.lot_tracked, item_group = excluded.item_group",
                    &[
                        &site.0,
                        &r.sku.as_str(),
                        &r.description,
                        &r.base_unit,
                        &r.unit_cost_minor,
                        &r.lot_tracked,
                        &r.group,
                    ],
                )?;
                progress.tick(1);
            }
            put_item_packs(tx, site, &rows)?;
            let written = rows.len();
            audit_in(tx, audit, serde_json::json!({"written": written}))?;
            Ok(written)
        })
        .await
}

/// Creates or updates the packs item rows name (their items are written): a GTIN that
/// belongs to another SKU refuses the batch, naming the row and `packs[j].gtin`.
fn put_item_packs(tx: &PgTx<'_>, site: SiteId, rows: &[NewItem]) -> Result<(), StoreError> {
    let mut errors = Vec::new();
    for (i, item) in rows.iter().enumerate() {
        for (j, p) in item.packs.iter().enumerate() {
            if let Some(owner) = tx.query_opt(
                "select i.sku from pack p join item i on i.id = p.item_id
                  where p.site_id = $1 and p.gtin = $2",
                &[&site.0, &p.gtin],
            )? {
                let owner: String = owner.get(0);
                if owner != item.sku.as_str() {
                    errors.push(RowError::new(
                        i,
                        format!("packs[{j}].gtin"),
                        format!("GTIN {} already belongs to SKU '{owner}'", p.gtin),
                    ));
                }
            }
        }
    }
    if !errors.is_empty() {
        return Err(StoreError::Rejected(errors));
    }
    for item in rows {
        for p in &item.packs {
            tx.execute(
                "insert into pack (site_id, item_id, gtin, level, units)
                 select $1, id, $3::text, $4::text, $5::bigint from item where site_id = $1 and sku = $2
                 on conflict (site_id, gtin) do update set level = excluded.level, units = excluded.units",
                &[&site.0, &item.sku.as_str(), &p.gtin, &p.level.as_str(), &i64::from(p.units)],
            )?;
        }
    }
    Ok(())
}

/// See [`crate::store::Store::put_packs`]: a GTIN stays with the item it was first given to.
pub async fn put_packs(
    store: &PgStore,
    site: SiteId,
    rows: Vec<NewPack>,
    progress: Progress,
    audit: Option<AuditEvent>,
) -> Result<usize, StoreError> {
    refuse_repeats(&rows, "gtin", "GTIN", |r| r.gtin.as_str())?;
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            let mut errors = Vec::new();
            let mut items = Vec::with_capacity(rows.len());
            for (i, r) in rows.iter().enumerate() {
                match tx.query_opt(
                    "select id from item where site_id = $1 and sku = $2",
                    &[&site.0, &r.sku.as_str()],
                )? {
                    None => errors.push(RowError::new(
                        i,
                        "sku",
                        format!("unknown SKU '{}' in this site", r.sku),
                    )),
                    Some(row) => items.push(row.get::<_, i64>(0)),
                }
                if let Some(owner) = tx.query_opt(
                    "select i.sku from pack p join item i on i.id = p.item_id
                      where p.site_id = $1 and p.gtin = $2",
                    &[&site.0, &r.gtin],
                )? {
                    let owner: String = owner.get(0);
                    if owner != r.sku.as_str() {
                        errors.push(RowError::new(
                            i,
                            "gtin",
                            format!("GTIN {} already belongs to SKU '{owner}'", r.gtin),
                        ));
                    }
                }
            }
            if !errors.is_empty() {
                return Err(StoreError::Rejected(errors));
            }
            for (r, item_id) in rows.iter().zip(items) {
                tx.execute(
                    "insert into pack (site_id, item_id, gtin, level, units) values ($1, $2, $3, $4, $5)
                     on conflict (site_id, gtin) do update set level = excluded.level, units = excluded.units",
                    &[&site.0, &item_id, &r.gtin, &r.level.as_str(), &i64::from(r.units)],
                )?;
                progress.tick(1);
            }
            let written = rows.len();
            audit_in(tx, audit, serde_json::json!({"written": written}))?;
            Ok(written)
        })
        .await
}

/// See [`crate::store::Store::shelf_keys`].
pub async fn shelf_keys(
    store: &PgStore,
    site: SiteId,
) -> Result<Vec<crate::store::ShelfKey>, StoreError> {
    let c = store.client().await?;
    Ok(rows(
        &c,
        "select k.bin_id, k.item_id, k.lot,
                coalesce((select qty from balance x
                          where x.bin_id = k.bin_id and x.item_id = k.item_id and x.lot = k.lot), 0),
                coalesce((select qty from demo_shelf s
                          where s.bin_id = k.bin_id and s.item_id = k.item_id and s.lot = k.lot), 0)
         from (select bin_id, item_id, lot from balance
               union select bin_id, item_id, lot from demo_shelf) k
         join bin b on b.id = k.bin_id
         where b.site_id = $1
           and exists (select 1 from demo_shelf s join bin sb on sb.id = s.bin_id
                       where sb.site_id = $1)
         order by k.bin_id, k.item_id, k.lot collate \"C\"",
        &[&site.0],
    )
    .await?
    .iter()
    .map(|r| crate::store::ShelfKey {
        bin: r.get(0),
        item: r.get(1),
        lot: r.get(2),
        book: r.get(3),
        truth: r.get(4),
    })
    .filter(|k| k.book != 0 || k.truth != 0)
    .collect())
}

/// See [`crate::store::Store::put_demo_shelf`].
pub async fn put_demo_shelf(
    store: &PgStore,
    site: SiteId,
    rows: Vec<ShelfRow>,
) -> Result<(), StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            tx.execute(
                "delete from demo_shelf where bin_id in (select id from bin where site_id = $1)",
                &[&site.0],
            )?;
            for r in &rows {
                tx.execute(
                    "insert into demo_shelf (bin_id, item_id, lot, qty)
                     select b.id, i.id, $4::text, $5::bigint from bin b, item i
                     where b.site_id = $1 and b.code = $2 and i.site_id = $1 and i.sku = $3",
                    &[&site.0, &r.bin.as_str(), &r.sku.as_str(), &r.lot, &r.qty],
                )?;
            }
            Ok(())
        })
        .await
}
