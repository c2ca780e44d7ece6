//! SQL for master data: sites, zones, bins, items and packs.

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
use crate::store::{Progress, ShelfRow, StoreError};
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use rusqlite::{Connection, OptionalExtension, Transaction, params};
use std::collections::HashMap;

fn site_from_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<(i64, String, String, String)> {
    Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?))
}

fn to_site((id, code, name, time_zone): (i64, String, String, String)) -> Result<Site, StoreError> {
    let code =
        SiteCode::parse(&code).map_err(|e| anyhow::anyhow!("stored site code is invalid: {e}"))?;
    Ok(Site {
        id: SiteId(id),
        code,
        name,
        time_zone: stored_zone(&time_zone),
    })
}

/// Reads a stored zone name. Sites made before zones were checked may hold any text: they
/// keep UTC days, as they always had, until `cairn site zone` sets a real zone. (Read on
/// every request, so it does not log.)
pub(crate) fn stored_zone(name: &str) -> SiteZone {
    SiteZone::parse(name).unwrap_or(SiteZone::UTC)
}

/// Reads a site's zone (UTC for a stored name the tz database does not know).
pub fn site_zone(conn: &Connection, site: SiteId) -> Result<SiteZone, StoreError> {
    let name: String = conn
        .prepare_cached("select time_zone from site where id = ?1")?
        .query_row([site.0], |r| r.get(0))?;
    Ok(stored_zone(&name))
}

/// Sets a site's time zone; returns the name it had.
pub fn set_site_zone(tx: &Transaction, site: SiteId, zone: SiteZone) -> Result<String, StoreError> {
    let was: String = tx
        .prepare_cached("select time_zone from site where id = ?1")?
        .query_row([site.0], |r| r.get(0))
        .optional()?
        .ok_or_else(|| StoreError::NotFound(format!("no site {}", site.0)))?;
    tx.prepare_cached("update site set time_zone = ?2 where id = ?1")?
        .execute(params![site.0, zone.name()])?;
    Ok(was)
}

/// Creates a site, refusing a code already taken.
pub fn create_site(tx: &Transaction, site: &NewSite) -> Result<Site, StoreError> {
    let taken: bool = tx
        .prepare_cached("select 1 from site where code = ?1")?
        .exists([site.code.as_str()])?;
    if taken {
        return Err(StoreError::Conflict(format!(
            "site '{}' already exists",
            site.code
        )));
    }
    tx.prepare_cached(
        "insert into site (code, name, time_zone, created_at) values (?1, ?2, ?3, ?4)",
    )?
    .execute(params![
        site.code.as_str(),
        site.name,
        site.time_zone.name(),
        Timestamp::now().0
    ])?;
    Ok(Site {
        id: SiteId(tx.last_insert_rowid()),
        code: site.code.clone(),
        name: site.name.clone(),
        time_zone: site.time_zone,
    })
}

/// Finds a site by code.
pub fn site(conn: &Connection, code: &SiteCode) -> Result<Option<Site>, StoreError> {
    conn.prepare_cached("select id, code, name, time_zone from site where code = ?1")?
        .query_row([code.as_str()], site_from_row)
        .optional()?
        .map(to_site)
        .transpose()
}

/// Lists every site by code.
pub fn sites(conn: &Connection) -> Result<Vec<Site>, StoreError> {
    conn.prepare_cached("select id, code, name, time_zone from site order by code")?
        .query_map([], site_from_row)?
        .map(|r| to_site(r?))
        .collect()
}

/// Counts a site's master data and movements.
pub fn site_counts(conn: &Connection, site: SiteId) -> Result<SiteCounts, StoreError> {
    let count = |sql: &str| -> rusqlite::Result<u64> {
        conn.prepare_cached(sql)?.query_row([site.0], |r| r.get(0))
    };
    Ok(SiteCounts {
        zones: count("select count(*) from zone where site_id = ?1")?,
        bins: count("select count(*) from bin where site_id = ?1")?,
        items: count("select count(*) from item where site_id = ?1")?,
        packs: count("select count(*) from pack where site_id = ?1")?,
        movements: count("select count(*) from movement where site_id = ?1")?,
        watermark: super::ledger::watermark(conn)?,
    })
}

/// Lists a site's bins (of one zone, if given) in zone, aisle, bay, level order.
pub fn bins(
    conn: &Connection,
    site: SiteId,
    zone: Option<&ZoneCode>,
) -> Result<Vec<Bin>, StoreError> {
    let mut stmt = conn.prepare_cached(
        "select b.code, z.code, b.aisle, b.bay, b.level, b.side, b.walk_seq
         from bin b join zone z on z.id = b.zone_id
         where b.site_id = ?1 and (?2 is null or z.code = ?2)
         order by z.walk_seq, z.code, b.aisle, b.bay, b.level",
    )?;
    let rows = stmt.query_map(params![site.0, zone.map(ZoneCode::as_str)], |r| {
        Ok((
            r.get::<_, String>(0)?,
            r.get::<_, String>(1)?,
            r.get(2)?,
            r.get(3)?,
            r.get(4)?,
            r.get::<_, String>(5)?,
            r.get(6)?,
        ))
    })?;
    let mut out = Vec::new();
    for row in rows {
        let (code, zone, aisle, bay, level, side, walk_seq) = row?;
        let bad =
            |e: crate::master::codes::CodeError| anyhow::anyhow!("stored bin is invalid: {e}");
        out.push(Bin {
            code: BinCode::parse(&code).map_err(bad)?,
            zone: ZoneCode::parse(&zone).map_err(bad)?,
            aisle,
            bay,
            level,
            side: Side::from_stored(&side),
            walk_seq,
        });
    }
    Ok(out)
}

/// Reads a page of a site's zones by code (see [`crate::store::Store::zone_rows`]).
pub fn zone_rows(
    conn: &Connection,
    site: SiteId,
    q: &ZoneQuery,
) -> Result<Vec<ZoneRow>, StoreError> {
    let mut stmt = conn.prepare_cached(
        "select z.code, z.walk_seq, (select count(*) from bin b where b.zone_id = z.id)
         from zone z
         where z.site_id = ?1 and (?2 is null or z.code > ?2)
         order by z.code
         limit ?3",
    )?;
    let rows = stmt.query_map(params![site.0, q.after, q.take as i64], |r| {
        Ok(ZoneRow {
            code: r.get(0)?,
            walk_seq: r.get(1)?,
            bins: r.get(2)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Reads a page of a site's bins by code (see [`crate::store::Store::bin_rows`]).
pub fn bin_rows(conn: &Connection, site: SiteId, q: &BinQuery) -> Result<Vec<BinRow>, StoreError> {
    let mut stmt = conn.prepare_cached(
        "select b.code, z.code, b.aisle, b.bay, b.level, b.side, b.walk_seq
         from bin b join zone z on z.id = b.zone_id
         where b.site_id = ?1 and (?2 is null or z.code = ?2) and (?3 is null or b.aisle = ?3)
           and (?4 is null or b.code > ?4)
         order by b.code
         limit ?5",
    )?;
    let rows = stmt.query_map(
        params![
            site.0,
            q.zone.as_ref().map(ZoneCode::as_str),
            q.aisle,
            q.after,
            q.take as i64
        ],
        |r| {
            Ok(BinRow {
                code: r.get(0)?,
                zone: r.get(1)?,
                aisle: r.get(2)?,
                bay: r.get(3)?,
                level: r.get(4)?,
                side: r.get(5)?,
                walk_seq: r.get(6)?,
            })
        },
    )?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Reads a page of a site's items by SKU, each with its packs and current class (see
/// [`crate::store::Store::item_rows`]).
pub fn item_rows(
    conn: &Connection,
    site: SiteId,
    q: &ItemQuery,
) -> Result<Vec<ItemRow>, StoreError> {
    let mut stmt = conn.prepare_cached(
        "select * from (
             select i.id, i.sku, i.description, i.base_unit, i.unit_cost_minor, i.lot_tracked,
                    i.item_group,
                    (select c.class from item_class c where c.item_id = i.id
                     order by c.run_id desc limit 1) as class
             from item i
             where i.site_id = ?1 and (?2 is null or i.sku = ?2)
               and (?3 is null or substr(i.sku, 1, length(?3)) = ?3)
               and (?4 is null or i.item_group = ?4)
               and (?6 is null or i.sku > ?6)
         ) x
         where (?5 is null or coalesce(x.class, '') = ?5)
         order by x.sku
         limit ?7",
    )?;
    let found = stmt
        .query_map(
            params![
                site.0,
                q.sku.as_ref().map(Sku::as_str),
                q.sku_prefix,
                q.group,
                q.class.map(ClassFilter::stored),
                q.after,
                q.take as i64
            ],
            |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    ItemRow {
                        sku: r.get(1)?,
                        description: r.get(2)?,
                        base_unit: r.get(3)?,
                        unit_cost_minor: r.get(4)?,
                        lot_tracked: r.get(5)?,
                        group: r.get(6)?,
                        packs: Vec::new(),
                        class: r.get(7)?,
                    },
                ))
            },
        )?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let mut packs = conn.prepare_cached(
        "select gtin, level, units from pack where item_id = ?1 order by units, gtin",
    )?;
    let mut out = Vec::with_capacity(found.len());
    for (id, mut item) in found {
        item.packs = packs
            .query_map([id], |r| {
                Ok(PackRow {
                    gtin: r.get(0)?,
                    level: r.get(1)?,
                    units: r.get(2)?,
                })
            })?
            .collect::<rusqlite::Result<Vec<_>>>()?;
        out.push(item);
    }
    Ok(out)
}

/// Reads a page of a site's lots by SKU, then lot code (see [`crate::store::Store::lot_rows`]).
pub fn lot_rows(conn: &Connection, site: SiteId, q: &LotQuery) -> Result<Vec<LotRow>, StoreError> {
    let (after_sku, after_lot) = q.after.clone().unzip();
    let mut stmt = conn.prepare_cached(
        "select i.sku, l.code, l.expiry
         from lot l join item i on i.id = l.item_id
         where i.site_id = ?1 and (?2 is null or i.sku = ?2)
           and (?3 is null or i.sku > ?3 or (i.sku = ?3 and l.code > ?4))
         order by i.sku, l.code
         limit ?5",
    )?;
    let rows = stmt.query_map(
        params![
            site.0,
            q.sku.as_ref().map(Sku::as_str),
            after_sku,
            after_lot,
            q.take as i64
        ],
        |r| {
            Ok(LotRow {
                sku: r.get(0)?,
                lot: r.get(1)?,
                expiry: r.get(2)?,
            })
        },
    )?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Reads a page of a site's packs by SKU, then GTIN (see [`crate::store::Store::pack_rows`]).
pub fn pack_rows(
    conn: &Connection,
    site: SiteId,
    q: &PackQuery,
) -> Result<Vec<SkuPackRow>, StoreError> {
    let (after_sku, after_gtin) = q.after.clone().unzip();
    let mut stmt = conn.prepare_cached(
        "select i.sku, p.gtin, p.level, p.units
         from pack p join item i on i.id = p.item_id
         where p.site_id = ?1 and (?2 is null or i.sku = ?2)
           and (?3 is null or i.sku > ?3 or (i.sku = ?3 and p.gtin > ?4))
         order by i.sku, p.gtin
         limit ?5",
    )?;
    let rows = stmt.query_map(
        params![
            site.0,
            q.sku.as_ref().map(Sku::as_str),
            after_sku,
            after_gtin,
            q.take as i64
        ],
        |r| {
            Ok(SkuPackRow {
                sku: r.get(0)?,
                gtin: r.get(1)?,
                level: r.get(2)?,
                units: r.get(3)?,
            })
        },
    )?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Lists, per named bin, the items with a non-zero balance there and their packs
/// (no quantities: this is what a blind counter may be told).
pub fn bin_contents(
    conn: &Connection,
    site: SiteId,
    bins: &[crate::master::codes::BinCode],
) -> Result<HashMap<String, Vec<ItemBrief>>, StoreError> {
    let mut items = conn.prepare_cached(
        "select distinct i.id, i.sku, i.description, i.base_unit, i.lot_tracked
         from bin b join balance k on k.bin_id = b.id join item i on i.id = k.item_id
         where b.site_id = ?1 and b.code = ?2 and k.qty <> 0
         order by i.sku",
    )?;
    let mut packs = conn
        .prepare_cached("select gtin, level, units from pack where item_id = ?1 order by units")?;
    let mut out = HashMap::new();
    for bin in bins {
        let rows = items
            .query_map(params![site.0, bin.as_str()], |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    r.get(1)?,
                    r.get(2)?,
                    r.get(3)?,
                    r.get(4)?,
                ))
            })?
            .collect::<rusqlite::Result<Vec<(i64, String, String, String, bool)>>>()?;
        let mut briefs = Vec::with_capacity(rows.len());
        for (id, sku, description, base_unit, lot_tracked) in rows {
            let packs = packs
                .query_map([id], |r| {
                    Ok(PackBrief {
                        gtin: r.get(0)?,
                        level: r.get(1)?,
                        units: r.get(2)?,
                    })
                })?
                .collect::<rusqlite::Result<Vec<_>>>()?;
            briefs.push(ItemBrief {
                sku,
                description,
                base_unit,
                lot_tracked,
                packs,
            });
        }
        out.insert(bin.as_str().to_string(), briefs);
    }
    Ok(out)
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

/// Creates or updates bins by code, creating zones in order of first appearance.
pub fn put_bins(
    tx: &Transaction,
    site: SiteId,
    rows: &[NewBin],
    progress: &Progress,
) -> Result<usize, StoreError> {
    refuse_repeats(rows, "code", "bin", |b| b.code.as_str())?;
    let mut zones: HashMap<String, i64> = HashMap::new();
    let mut zone_q = tx.prepare_cached("select id from zone where site_id = ?1 and code = ?2")?;
    let mut zone_ins = tx.prepare_cached(
        "insert into zone (site_id, code, walk_seq)
         values (?1, ?2, (select coalesce(max(walk_seq), 0) + 1 from zone where site_id = ?1))",
    )?;
    let mut bin_ins = tx.prepare_cached(
        "insert into bin (site_id, zone_id, code, aisle, bay, level, side, walk_seq)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)
         on conflict (site_id, code) do update set zone_id = excluded.zone_id, aisle = excluded.aisle,
             bay = excluded.bay, level = excluded.level, side = excluded.side, walk_seq = excluded.walk_seq",
    )?;
    for b in rows {
        let zone_id = match zones.get(b.zone.as_str()) {
            Some(z) => *z,
            None => {
                let z = match zone_q
                    .query_row(params![site.0, b.zone.as_str()], |r| r.get(0))
                    .optional()?
                {
                    Some(z) => z,
                    None => {
                        zone_ins.execute(params![site.0, b.zone.as_str()])?;
                        tx.last_insert_rowid()
                    }
                };
                zones.insert(b.zone.as_str().to_string(), z);
                z
            }
        };
        bin_ins.execute(params![
            site.0,
            zone_id,
            b.code.as_str(),
            b.aisle,
            b.bay,
            b.level,
            b.side.as_str(),
            b.walk_seq
        ])?;
        progress.tick(1);
    }
    Ok(rows.len())
}

/// Creates or updates items by SKU.
pub fn put_items(
    tx: &Transaction,
    site: SiteId,
    rows: &[NewItem],
    progress: &Progress,
) -> Result<usize, StoreError> {
    refuse_repeats(rows, "sku", "SKU", |r| r.sku.as_str())?;
    let repeated = crate::master::repeated_pack_gtins(rows);
    if !repeated.is_empty() {
        return Err(StoreError::Rejected(repeated));
    }
    let mut ins = tx.prepare_cached(
        "insert into item (site_id, sku, description, base_unit, unit_cost_minor, lot_tracked, item_group)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7)
         on conflict (site_id, sku) do update set description = excluded.description,
             base_unit = excluded.base_unit, unit_cost_minor = excluded.unit_cost_minor,
             lot_tracked = excluded.lot_tracked, item_group = excluded.item_group",
    )?;
    for r in rows {
        ins.execute(params![
            site.0,
            r.sku.as_str(),
            r.description,
            r.base_unit,
            r.unit_cost_minor,
            r.lot_tracked,
            r.group
        ])?;
        progress.tick(1);
    }
    put_item_packs(tx, site, rows)?;
    Ok(rows.len())
}

/// Creates or updates the packs item rows name (their items are written): a GTIN that
/// belongs to another SKU refuses the batch, naming the row and `packs[j].gtin`.
fn put_item_packs(tx: &Transaction, site: SiteId, rows: &[NewItem]) -> Result<(), StoreError> {
    let mut owner_q = tx.prepare_cached(
        "select i.sku from pack p join item i on i.id = p.item_id where p.site_id = ?1 and p.gtin = ?2",
    )?;
    let mut errors = Vec::new();
    for (i, item) in rows.iter().enumerate() {
        for (j, p) in item.packs.iter().enumerate() {
            if let Some(owner) = owner_q
                .query_row(params![site.0, p.gtin], |r| r.get::<_, String>(0))
                .optional()?
                && owner != item.sku.as_str()
            {
                errors.push(RowError::new(
                    i,
                    format!("packs[{j}].gtin"),
                    format!("GTIN {} already belongs to SKU '{owner}'", p.gtin),
                ));
            }
        }
    }
    if !errors.is_empty() {
        return Err(StoreError::Rejected(errors));
    }
    let mut ins = tx.prepare_cached(
        "insert into pack (site_id, item_id, gtin, level, units)
         select ?1, id, ?3, ?4, ?5 from item where site_id = ?1 and sku = ?2
         on conflict (site_id, gtin) do update set level = excluded.level, units = excluded.units",
    )?;
    for item in rows {
        for p in &item.packs {
            ins.execute(params![
                site.0,
                item.sku.as_str(),
                p.gtin,
                p.level.as_str(),
                p.units
            ])?;
        }
    }
    Ok(())
}

/// Creates or updates packs by GTIN; a GTIN stays with the item it was first given to.
pub fn put_packs(
    tx: &Transaction,
    site: SiteId,
    rows: &[NewPack],
    progress: &Progress,
) -> Result<usize, StoreError> {
    refuse_repeats(rows, "gtin", "GTIN", |r| r.gtin.as_str())?;
    let mut item_q = tx.prepare_cached("select id from item where site_id = ?1 and sku = ?2")?;
    let mut owner_q = tx.prepare_cached("select i.sku from pack p join item i on i.id = p.item_id where p.site_id = ?1 and p.gtin = ?2")?;
    let mut errors = Vec::new();
    let mut items = Vec::with_capacity(rows.len());
    for (i, r) in rows.iter().enumerate() {
        match item_q
            .query_row(params![site.0, r.sku.as_str()], |row| row.get::<_, i64>(0))
            .optional()?
        {
            None => errors.push(RowError::new(
                i,
                "sku",
                format!("unknown SKU '{}' in this site", r.sku),
            )),
            Some(id) => items.push(id),
        }
        if let Some(owner) = owner_q
            .query_row(params![site.0, r.gtin], |row| row.get::<_, String>(0))
            .optional()?
            && owner != r.sku.as_str()
        {
            errors.push(RowError::new(
                i,
                "gtin",
                format!("GTIN {} already belongs to SKU '{owner}'", r.gtin),
            ));
        }
    }
    if !errors.is_empty() {
        return Err(StoreError::Rejected(errors));
    }
    let mut ins = tx.prepare_cached(
        "insert into pack (site_id, item_id, gtin, level, units) values (?1, ?2, ?3, ?4, ?5)
         on conflict (site_id, gtin) do update set level = excluded.level, units = excluded.units",
    )?;
    for (r, item_id) in rows.iter().zip(items) {
        ins.execute(params![site.0, item_id, r.gtin, r.level.as_str(), r.units])?;
        progress.tick(1);
    }
    Ok(rows.len())
}

/// The keys of a demo site with book and shelf quantities; no shelf rows, no keys.
const SHELF_KEYS_SQL: &str = "select k.bin_id, k.item_id, k.lot,
        coalesce((select qty from balance x
                  where x.bin_id = k.bin_id and x.item_id = k.item_id and x.lot = k.lot), 0),
        coalesce((select qty from demo_shelf s
                  where s.bin_id = k.bin_id and s.item_id = k.item_id and s.lot = k.lot), 0)
     from (select bin_id, item_id, lot from balance
           union select bin_id, item_id, lot from demo_shelf) k
     join bin b on b.id = k.bin_id
     where b.site_id = ?1
       and exists (select 1 from demo_shelf s join bin sb on sb.id = s.bin_id where sb.site_id = ?1)
     order by k.bin_id, k.item_id, k.lot";

/// See [`crate::store::Store::shelf_keys`].
pub fn shelf_keys(
    conn: &Connection,
    site: SiteId,
) -> Result<Vec<crate::store::ShelfKey>, StoreError> {
    let mut q = conn.prepare_cached(SHELF_KEYS_SQL)?;
    let rows = q.query_map([site.0], |r| {
        Ok(crate::store::ShelfKey {
            bin: r.get(0)?,
            item: r.get(1)?,
            lot: r.get(2)?,
            book: r.get(3)?,
            truth: r.get(4)?,
        })
    })?;
    Ok(rows
        .collect::<rusqlite::Result<Vec<_>>>()?
        .into_iter()
        .filter(|k| k.book != 0 || k.truth != 0)
        .collect())
}

/// Replaces a demo site's true shelf quantities.
pub fn put_demo_shelf(tx: &Transaction, site: SiteId, rows: &[ShelfRow]) -> Result<(), StoreError> {
    tx.execute(
        "delete from demo_shelf where bin_id in (select id from bin where site_id = ?1)",
        [site.0],
    )?;
    let mut ins = tx.prepare_cached(
        "insert into demo_shelf (bin_id, item_id, lot, qty)
         select b.id, i.id, ?4, ?5 from bin b, item i
         where b.site_id = ?1 and b.code = ?2 and i.site_id = ?1 and i.sku = ?3",
    )?;
    for r in rows {
        ins.execute(params![
            site.0,
            r.bin.as_str(),
            r.sku.as_str(),
            r.lot,
            r.qty
        ])?;
    }
    Ok(())
}
