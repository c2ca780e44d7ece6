//! What each `/api/v1` operation is for, in words, with its query parameters and the
//! schemas of its body and answer. The route table says which routes exist and who may
//! use them; [`describe`] answers `None` for a route it does not know, which fails the
//! document's test.

use super::Schemas;
use crate::accuracy::inputs::AccuracySettings;
use crate::netting::service::{NettingSettings, ReasonCode, SourceTimingRow};
use crate::planning::routes::{BuildBody, CalendarBody, HoldBody, MoveBody};
use crate::planning::{ListView, Settings as PlanningSettings};
use axum::http::Method;
use serde_json::{Value, json};

/// The document's introduction: what every route shares.
pub const OVERVIEW: &str = "\
Cairn's API for host systems (the ERP or WMS that owns items, bins and movements) and for \
Cairn's own phone app.

**Credentials.** `Authorization: Bearer TOKEN`: a host system's integration token \
(`cairn_api_…`, one role of one user at one site) or a phone's device token \
(`cairn_dev_…`). A signed-in person's session cookie is taken for GET only. Each \
operation says which roles it admits (`x-cairn-access`); a counter never reads book \
quantities.

**Errors.** Every error answer is `{\"error\": TEXT}`; a refused batch (422) adds \
`rows`, one entry per broken rule, each naming the element by `index` (its 0-based \
position in the array sent) and the `field`. A batch is written whole or not at all. \
Query-parameter errors are 400 and start with the parameter's name.

**Instants.** Every instant on `/api/v1` is RFC 3339 in UTC with three fraction digits \
and `Z` when Cairn writes it (`2026-03-02T08:15:00.000Z`). Cairn reads any RFC 3339 \
offset with zero to three fraction digits; a finer fraction is refused (422 in a batch, \
400 in a parameter) naming the field, never cut. Days are `YYYY-MM-DD`, a site's local \
days. The one exception is the phone's sync protocol (`POST …/sync`), whose clock \
fields (`device_clock`, an event's `at`, `server_clock`) are integer milliseconds since \
the Unix epoch, on that route only.

**Movement numbers.** A movement has two names: `id` is the sender's (the key that makes \
a resent batch change nothing: the same `id` with the same content is counted as \
`already_recorded`, with other content refused), and `seq` is the ledger's (given when it \
is written, rising in writing order, never reused). A `watermark` is always a `seq`: the \
highest one written at the site when a batch was answered or a result was netted.

**Paging.** Lists answer a page and `next`; send `next` back as `after` for the following \
page. `next` is null on the last page. Read-back lists (zones, bins, items, lots, \
packs, planner inputs) carry a weak ETag and answer 304 to `If-None-Match`.

**Limits.** A batch holds at most 5,000 elements; a body at most `max_body_bytes`. A \
server busy hashing answers 429 with `Retry-After`.";

/// One operation's words and shapes.
pub struct Op {
    pub summary: &'static str,
    pub description: String,
    pub query: Vec<QueryParam>,
    pub body: Option<Value>,
    pub body_example: Option<Value>,
    pub ok_status: u16,
    pub ok_text: &'static str,
    pub ok_schema: Option<Value>,
    pub ok_example: Option<Value>,
    pub etag: bool,
    pub csv: bool,
    /// Error answers this operation gives beyond those of every route of its kind.
    pub errors: &'static [(u16, &'static str)],
}

/// One query parameter.
pub struct QueryParam {
    pub name: &'static str,
    pub description: &'static str,
    pub schema: Value,
}

impl Op {
    fn new(summary: &'static str, ok_text: &'static str, ok_schema: Value) -> Self {
        Self {
            summary,
            description: String::new(),
            query: Vec::new(),
            body: None,
            body_example: None,
            ok_status: 200,
            ok_text,
            ok_schema: Some(ok_schema),
            ok_example: None,
            etag: false,
            csv: false,
            errors: &[],
        }
    }

    fn says(mut self, text: &str) -> Self {
        self.description = text.to_string();
        self
    }

    fn q(mut self, name: &'static str, description: &'static str, schema: Value) -> Self {
        self.query.push(QueryParam {
            name,
            description,
            schema,
        });
        self
    }

    /// Adds `limit` and `after` (an opaque cursor).
    fn paged(self, max: u32, default: u32) -> Self {
        self.q(
            "limit",
            "Most rows on the page.",
            json!({ "type": "integer", "minimum": 1, "maximum": max, "default": default }),
        )
        .q(
            "after",
            "The `next` of the previous page (opaque).",
            json!({ "type": "string" }),
        )
    }

    fn body(mut self, schema: Value, example: Value) -> Self {
        self.body = Some(schema);
        self.body_example = Some(example);
        self
    }

    fn status(mut self, status: u16) -> Self {
        self.ok_status = status;
        self
    }

    fn no_content(mut self) -> Self {
        self.ok_schema = None;
        self.ok_status = 204;
        self
    }

    fn example(mut self, example: Value) -> Self {
        self.ok_example = Some(example);
        self
    }

    fn etag(mut self) -> Self {
        self.etag = true;
        self
    }

    fn csv(mut self) -> Self {
        self.csv = true;
        self.q(
            "format",
            "`json` (the default) or `csv`.",
            json!({ "type": "string", "enum": ["json", "csv"] }),
        )
    }

    fn errors(mut self, errors: &'static [(u16, &'static str)]) -> Self {
        self.errors = errors;
        self
    }
}

/// Describes a path parameter: its words and schema.
pub fn path_param(name: &str) -> (&'static str, Value) {
    match name {
        "site" => (
            "The site's code (`KLN`).",
            json!({ "type": "string", "examples": ["KLN"] }),
        ),
        "bin" => (
            "A bin code (`A-01-02-3`).",
            json!({ "type": "string", "examples": ["A-01-02-3"] }),
        ),
        "sku" => (
            "An item's SKU.",
            json!({ "type": "string", "examples": ["KL-1001"] }),
        ),
        "day" => (
            "A local day of the site, `YYYY-MM-DD`.",
            json!({ "type": "string", "format": "date", "examples": ["2026-03-02"] }),
        ),
        "id" => (
            "A count result's id.",
            json!({ "type": "integer", "format": "int64", "minimum": 1 }),
        ),
        "task" => (
            "A count task's id.",
            json!({ "type": "integer", "format": "int64", "minimum": 1 }),
        ),
        "run" => (
            "A run's number on the day's list (from 1).",
            json!({ "type": "integer", "minimum": 1 }),
        ),
        _ => ("", json!({ "type": "string" })),
    }
}

fn string() -> Value {
    json!({ "type": "string" })
}

fn day() -> Value {
    json!({ "type": "string", "format": "date" })
}

fn instant() -> Value {
    json!({ "type": "string", "format": "date-time" })
}

/// A page of `rows` under `name` with its `next` cursor.
fn page(name: &str, rows: Value, next: Value) -> Value {
    json!({
        "type": "object",
        "required": [name, "next"],
        "properties": {
            name: { "type": "array", "items": rows },
            "next": { "oneOf": [next, { "type": "null" }],
                      "description": "Pass as `after` for the next page; null on the last." },
        },
    })
}

/// The answer of a master-data batch.
fn written() -> Value {
    json!({
        "type": "object",
        "required": ["written"],
        "properties": { "written": { "type": "integer", "minimum": 0,
            "description": "Rows created or updated." } },
    })
}

const BATCH: &[(u16, &str)] = &[(
    422,
    "The batch was refused whole: `rows` names each element (`index`) and field at fault.",
)];
const BATCH_409: &[(u16, &str)] = &[
    (
        409,
        "The batch conflicts with what the ledger holds (the text says which).",
    ),
    (
        422,
        "The batch was refused whole: `rows` names each element (`index`) and field at fault; \
         a movement `id` already in the ledger with other content is refused here, on `id`.",
    ),
];
const FIELDS: &[(u16, &str)] = &[(
    422,
    "The body was refused whole: `rows` names each field at fault (`index` 0).",
)];
const CONFLICT: &[(u16, &str)] = &[(
    409,
    "The change conflicts with the state (the text says which).",
)];
const MOVE: &[(u16, &str)] = &[
    (
        409,
        "The change conflicts with the state (the text says which).",
    ),
    (
        422,
        "`run` names no run of the day's list: `rows` names it (`index` 0, `field` `run`).",
    ),
];
const ENROL: &[(u16, &str)] = &[
    (401, "Wrong user name or PIN (the same text for both)."),
    (403, "The user holds no `counter` role at that site."),
    (
        429,
        "Too many failed attempts (throttled), or the server is busy hashing (`Retry-After`).",
    ),
];

/// Describes the operation `method path`, or `None` for a route it does not know.
pub fn describe(method: &Method, path: &str, s: &mut Schemas) -> Option<Op> {
    let site = path.strip_prefix("/api/v1/sites/{site}");
    let op = match (method.as_str(), path, site) {
        ("GET", super::DOCUMENT_PATH, _) => Op::new(
            "This document",
            "The OpenAPI 3.1 document of `/api/v1`.",
            json!({ "type": "object" }),
        ),
        ("POST", "/api/v1/devices", _) => Op::new(
            "Enrol a phone",
            "The phone's token (shown once) and who it signs in as.",
            s.of::<crate::accounts::routes::Enrolled>(),
        )
        .status(201)
        .says("A counter enrols a phone with their user name and PIN at one site. The PIN \
               is checked under the sign-in throttle.")
        .body(
            s.of::<crate::accounts::routes::EnrolRequest>(),
            json!({ "user": "esme", "pin": "2468", "site": "KLN", "device_name": "phone 3" }),
        )
        .example(json!({ "token": "cairn_dev_…", "device_id": 4, "site": "KLN", "user": "esme",
                         "display_name": "Esme Tulloch", "server_time": "2026-03-02T08:00:00.000Z" }))
        .errors(ENROL),
        ("GET", "/api/v1/device", _) => Op::new(
            "Who this phone is",
            "The device, its user, the user's roles and the server's time.",
            s.of::<crate::accounts::routes::DeviceView>(),
        ),
        ("DELETE", "/api/v1/device", _) => Op::new("Forget this phone", "The device token is revoked.", json!({}))
            .no_content()
            .says("The phone revokes its own token; the next request with it is 401."),
        ("GET", "/api/v1/sites", _) => Op::new(
            "List my sites",
            "The sites where the credential holds a role.",
            s.list_of::<crate::master::Site>(),
        ),
        (_, _, Some(tail)) => site_op(method.as_str(), tail, s)?,
        _ => return None,
    };
    Some(op)
}

/// Describes an operation under `/api/v1/sites/{site}`.
fn site_op(method: &str, tail: &str, s: &mut Schemas) -> Option<Op> {
    let op = match (method, tail) {
        ("GET", "") => Op::new(
            "Read a site",
            "The site and how much it holds.",
            s.of::<crate::master::routes::SiteView>(),
        ),
        // ---- master data -------------------------------------------------------------
        ("GET", "/zones") => Op::new(
            "Read zones back",
            "A page of zones by code.",
            page("zones", s.of::<crate::master::read::ZoneRow>(), string()),
        )
        .says("Zones are made by the bins that name them; `bins` counts each zone's bins.")
        .paged(1000, 200)
        .etag(),
        ("GET", "/bins") => Op::new(
            "Read bins back",
            "A page of bins by code, each as `POST bins` takes it.",
            page("bins", s.of::<crate::master::read::BinRow>(), string()),
        )
        .q("zone", "Only this zone's bins.", string())
        .q("aisle", "Only this aisle's bins.", json!({ "type": "integer", "minimum": 0, "maximum": 999 }))
        .paged(1000, 200)
        .etag(),
        ("POST", "/bins") => Op::new("Create or update bins", "Every bin was written.", written())
            .says("A batch of bins, written whole or not at all. A bin's `code` defaults to the \
                   one built from its place; its zone is made when first named.")
            .body(s.list_of::<crate::master::BinRecord>(),
                  json!([{ "zone": "A", "aisle": 1, "bay": 2, "level": 3 }]))
            .errors(BATCH),
        ("GET", "/items") => Op::new(
            "Read items back",
            "A page of items by SKU, each as `POST items` takes it, with its packs and read-only `class`.",
            page("items", s.of::<crate::master::read::ItemRow>(), string()),
        )
        .q("sku", "Only this SKU.", string())
        .q("sku_prefix", "Only SKUs starting with this.", string())
        .q("group", "Only this item group.", string())
        .q("class", "Only this ABC class; `none`: items with no class yet.",
           json!({ "type": "string", "enum": ["A", "B", "C", "none"] }))
        .paged(1000, 200)
        .etag(),
        ("POST", "/items") => Op::new("Create or update items", "Every item was written.", written())
            .says("A batch of items with their packs, written whole or not at all. A pack not \
                   named is kept. `class` is read-only: taken and ignored, so a page read back \
                   can be sent again as it is.")
            .body(s.list_of::<crate::master::ItemRecord>(),
                  json!([{ "sku": "KL-1001", "description": "Hex bolt M8 x 40, zinc", "base_unit": "each",
                           "unit_cost_minor": 12, "lot_tracked": false, "group": "fasteners",
                           "packs": [{ "gtin": "05012345678900", "level": "case", "units": 100 }] }]))
            .errors(BATCH),
        ("GET", "/lots") => Op::new(
            "Read lots back",
            "A page of lots by SKU, then lot code.",
            page("lots", s.of::<crate::master::read::LotRow>(), string()),
        )
        .says("Lots are made by the movements that name them.")
        .q("sku", "Only this SKU's lots.", string())
        .paged(1000, 200)
        .etag(),
        ("GET", "/packs") => Op::new(
            "Read packs back",
            "A page of packs by SKU, then GTIN, each as `POST packs` takes it.",
            page("packs", s.of::<crate::master::read::SkuPackRow>(), string()),
        )
        .says("The same packs `GET items` lists under each item, one row each with its SKU.")
        .q("sku", "Only this SKU's packs.", string())
        .paged(1000, 200)
        .etag(),
        ("POST", "/packs") => Op::new("Create or update packs", "Every pack was written.", written())
            .says("A batch of packs (a GTIN, its level and how many base units it holds), \
                   written whole or not at all.")
            .body(s.list_of::<crate::master::PackRecord>(),
                  json!([{ "sku": "KL-1001", "gtin": "05012345678900", "level": "case", "units": 100 }]))
            .errors(BATCH),
        // ---- ledger -------------------------------------------------------------------
        ("POST", "/movements") => Op::new(
            "Post movements",
            "What the batch wrote: new movements, ones already in the ledger, and the watermark.",
            s.of::<crate::ledger::RecordOutcome>(),
        )
        .says("A batch of movements, written whole or not at all, idempotent by `id`: a \
               movement whose `id` is in the ledger with the same content is counted as \
               `already_recorded` and changes nothing; with other content the batch is \
               refused. `event_at` is an instant (at most three fraction digits, at most 5 \
               minutes ahead of the server).")
        .body(s.list_of::<crate::ledger::MovementRecord>(),
              json!([{ "id": "kls-rcv-88121-1", "bin": "A-01-02-3", "sku": "KL-1001", "qty": 200,
                       "kind": "receipt", "event_at": "2026-03-02T07:42:10.250Z", "doc_ref": "PO-88121" }]))
        .example(json!({ "recorded": 1, "already_recorded": 0, "watermark": 5123 }))
        .errors(BATCH_409),
        ("GET", "/balances") => Op::new(
            "Read book balances",
            "A page of balances by key, with the watermark they were read at.",
            s.of::<crate::store::BalancePage>(),
        )
        .q("bin", "Only this bin.", string())
        .q("sku", "Only this SKU.", string())
        .q("lot", "Only this lot.", string())
        .q("at", "The balance as of this instant (default: now).", instant())
        .q("include_zero", "Include keys whose balance is 0.", json!({ "type": "boolean" }))
        .paged(1000, 200),
        ("GET", "/bins/{bin}/movements") | ("GET", "/items/{sku}/movements") => Op::new(
            "Read movement history",
            "A page of movements in event order; each has the sender's `id` and the ledger's `seq`.",
            s.of::<crate::store::HistoryPage>(),
        )
        .q("from", "Movements at or after this instant.", instant())
        .q("to", "Movements at or before this instant.", instant())
        .paged(1000, 200),
        ("GET", "/adjustments") => Op::new(
            "Read posted count adjustments",
            "A page of adjustments in ledger order (`seq`).",
            s.of::<crate::review::routes::FeedPage>(),
        )
        .says("The adjustments Cairn posted (approved or automatic), for the host to apply. \
               Keep the last `next` and send it as `after` to read only what is new.")
        .q("after", "A cursor: the `next` of the previous page (a ledger `seq`); 0 or none: from the start.",
           json!({ "type": "integer", "format": "int64", "minimum": 0 }))
        .q("limit", "Most rows on the page.", json!({ "type": "integer", "minimum": 1, "maximum": crate::review::MAX_FEED_ROWS, "default": 200 }))
        .csv(),
        // ---- netting --------------------------------------------------------------------
        ("GET", "/count-results") => Op::new(
            "List count results",
            "A page of results by id.",
            s.of::<crate::netting::results::ResultPage>(),
        )
        .says("`state`: `open` (the default: current results out of tolerance with no review \
               yet), `current` (every result not superseded by a re-net) or `all`. `from` and \
               `to` bound `counted_at`, both inclusive. A result's `watermark` is the ledger \
               `seq` it was netted against.")
        .q("state", "Which results.", json!({ "type": "string", "enum": ["open", "current", "all"], "default": "open" }))
        .q("bin", "Only this bin.", string())
        .q("sku", "Only this SKU.", string())
        .q("lot", "Only this lot (empty: keys without a lot).", string())
        .q("pass", "Only this count pass (id or uid).", string())
        .q("from", "Counted at or after this instant.", instant())
        .q("to", "Counted at or before this instant.", instant())
        .q("limit", "Most rows on the page.", json!({ "type": "integer", "minimum": 1, "maximum": 1000, "default": 200 }))
        .q("after", "The `next` of the previous page: results with a higher id.", json!({ "type": "integer", "format": "int64" })),
        ("GET", "/count-results/{id}") => Op::new(
            "Read one count result",
            "The result with its evidence, the rows it replaced and its recount tasks.",
            s.of::<crate::netting::results::ResultDetail>(),
        ),
        ("GET", "/count-policy") => Op::new(
            "Read the count policy",
            "The site's netting settings, source timings and reason codes.",
            s.of::<crate::netting::routes::CountPolicy>(),
        )
        .etag(),
        ("GET", "/netting/settings") => Op::new("Read netting settings", "The settings.", s.of::<NettingSettings>()),
        ("PUT", "/netting/settings") => Op::new("Set netting settings", "The settings now.", s.of::<NettingSettings>())
            .body(s.of::<NettingSettings>(),
                  serde_json::to_value(NettingSettings::default()).expect("settings serialise"))
            .errors(CONFLICT),
        ("GET", "/netting/sources") => Op::new(
            "Read source timings",
            "Each movement source's uncertainty and posting lag (milliseconds).",
            s.list_of::<SourceTimingRow>(),
        ),
        ("PUT", "/netting/sources") => Op::new("Set source timings", "The timings now.", s.list_of::<SourceTimingRow>())
            .body(s.list_of::<SourceTimingRow>(),
                  json!([{ "source": "erp", "uncertainty_ms": 2000, "posting_lag_ms": 60000 }]))
            .errors(CONFLICT),
        ("GET", "/netting/reason-codes") => Op::new(
            "Read reason codes",
            "The codes a reviewer gives an approval.",
            s.list_of::<ReasonCode>(),
        ),
        ("PUT", "/netting/reason-codes") => Op::new("Set reason codes", "The codes now.", s.list_of::<ReasonCode>())
            .says("A code a decision names is never dropped: sending a list without it is a 409.")
            .body(s.list_of::<ReasonCode>(), json!([{ "code": "MISPICK", "label": "Picked from the wrong bin" }]))
            .errors(CONFLICT),
        // ---- phones -----------------------------------------------------------------------
        ("POST", "/sync") => Op::new(
            "Sync a phone",
            "Each event's result and the clock correction.",
            s.of::<cairn_scan::wire::SyncResponse>(),
        )
        .says("The phone's sync protocol. Its clock fields are integer milliseconds since the \
               Unix epoch (`device_clock`, each event's `at`; `server_clock` in the answer), \
               the only route that does not write instants as RFC 3339: the phone measures \
               its clock's offset from them. The wire types are the same Rust types in the \
               server and the phone's wasm.")
        .body(s.of::<cairn_scan::wire::SyncRequest>(), json!({ "device_clock": 1772438400000_i64, "events": [] }))
        .errors(CONFLICT),
        ("GET", "/catalog") => Op::new(
            "Read the phone's catalogue",
            "Items and packs a counter may scan, with a version.",
            s.of::<crate::sync::routes::Catalog>(),
        )
        .etag(),
        ("GET", "/count-lines") => Op::new(
            "Read counted lines",
            "A page of lines the phones sent.",
            s.of::<crate::sync::routes::LinesPage>(),
        )
        .q("after", "The `next` of the previous page: lines with a higher id.", json!({ "type": "integer", "format": "int64" }))
        .q("limit", "Most rows on the page.", json!({ "type": "integer", "minimum": 1, "maximum": 5000, "default": 5000 })),
        ("GET", "/my-tasks") => Op::new(
            "Read my count tasks",
            "The counter's part of the day's list, blind: no book quantities.",
            s.of::<crate::planning::phone::PhoneList>(),
        )
        .q("day", "The local day (default: today at the site).", day()),
        // ---- planning ---------------------------------------------------------------------
        ("GET", "/planning/settings") => Op::new("Read planning settings", "The settings.", s.of::<PlanningSettings>()),
        ("PUT", "/planning/settings") => Op::new("Set planning settings", "The settings now.", s.of::<PlanningSettings>())
            .body(s.of::<PlanningSettings>(),
                  serde_json::to_value(PlanningSettings::default()).expect("settings serialise")),
        ("GET", "/planning/frequency-policy") => Op::new(
            "Read the frequency policy",
            "How the site sets count intervals.",
            s.of::<crate::planning::policy::FrequencyPolicy>(),
        ),
        ("PUT", "/planning/frequency-policy") => Op::new(
            "Set the frequency policy",
            "The policy now; the change is written to the audit log. A field at fault is refused (422) with its name.",
            s.of::<crate::planning::policy::FrequencyPolicy>(),
        )
        .body(
            s.of::<crate::planning::policy::FrequencyPolicyChange>(),
            json!({ "policy": "blend", "floor_a": 12, "floor_b": 4, "floor_c": 1 }),
        )
        .errors(FIELDS),
        ("GET", "/planning/calendar") => Op::new(
            "Read the working calendar",
            "Working weekdays and holidays.",
            s.of::<CalendarBody>(),
        ),
        ("PUT", "/planning/calendar") => Op::new(
            "Set the working calendar",
            "The calendar now.",
            s.of::<CalendarBody>(),
        )
        .body(s.of::<CalendarBody>(), json!({ "working_weekdays": ["mon", "tue", "wed", "thu", "fri"], "holidays": [] })),
        ("GET", "/planning/abc") => Op::new("Read the last ABC run", "Its summary.", s.of::<crate::planning::AbcSummary>()),
        ("POST", "/planning/abc") => Op::new("Run ABC classification", "The run's summary.", s.of::<crate::planning::AbcSummary>())
            .q("day", "The run's day (default: today at the site).", day()),
        ("GET", "/items/{sku}/classes") => Op::new(
            "Read an item's class history",
            "Each change of the item's class.",
            s.list_of::<crate::planning::ClassChange>(),
        ),
        ("POST", "/short-picks") => Op::new("Report short picks", "What was recorded.", s.of::<crate::planning::short_pick::ShortPickOutcome>())
            .says("The host reports picks that found less than the book said; each is an \
                   instant (`reported_at`) and a bin and SKU. Written whole or not at all.")
            .body(s.list_of::<crate::planning::short_pick::ShortPickRecord>(),
                  json!([{ "id": "erp-short-9001", "bin": "A-01-02-3", "sku": "KL-1001", "short_qty": 4,
                           "reported_at": "2026-03-02T11:20:00.000Z" }]))
            .errors(BATCH),
        ("POST", "/count-lists") => Op::new("Build the day's count list", "The list.", s.of::<ListView>())
            .body(s.of::<BuildBody>(),
                  json!({ "day": "2026-03-02", "counters": 2, "minutes": 120 }))
            .errors(CONFLICT),
        ("GET", "/count-lists/{day}") => Op::new("Read a day's count list", "The list.", s.of::<ListView>())
            .csv(),
        ("POST", "/count-lists/{day}/tasks/{task}/move") => Op::new("Move a task to another run", "The list.", s.of::<ListView>())
            .body(s.of::<MoveBody>(), json!({ "run": 2 }))
            .errors(MOVE),
        ("PUT", "/count-lists/{day}/runs/{run}") => Op::new("Give a run to a counter", "The list.", s.of::<ListView>())
            .body(s.of::<HoldBody>(), json!({ "holder": "esme" }))
            .errors(CONFLICT),
        ("GET", "/count-lists/{day}/progress") => Op::new(
            "Read a day's progress",
            "Tasks and estimated seconds per run: not started, in progress, done.",
            s.of::<crate::planning::progress::Progress>(),
        ),
        // ---- accuracy ---------------------------------------------------------------------
        ("GET", "/accuracy") => period(Op::new("Read record accuracy", "The accuracy report.", s.of::<crate::accuracy::service::AccuracyReport>()))
            .q("class", "Only this ABC class.", json!({ "type": "string", "enum": ["", "A", "B", "C"] }))
            .q("zone", "Only this zone.", string())
            .q("table", "Which table the CSV holds (default `summary`).", string())
            .csv(),
        ("GET", "/accuracy/items") => table_view(period(Op::new(
            "Read record error per item",
            "Every row the filter keeps (never paged).",
            s.list_of::<crate::accuracy::service::ItemReport>(),
        )))
        .csv(),
        ("GET", "/accuracy/items/{sku}") => period(Op::new(
            "Read one item's record error",
            "The item's figures.",
            s.of::<crate::accuracy::service::ItemReport>(),
        ))
        .csv(),
        ("GET", "/accuracy/settings") => Op::new("Read accuracy settings", "The settings.", s.of::<AccuracySettings>()),
        ("PUT", "/accuracy/settings") => Op::new("Set accuracy settings", "The settings now.", s.of::<AccuracySettings>())
            .body(s.of::<AccuracySettings>(), serde_json::to_value(AccuracySettings::default()).expect("settings serialise")),
        ("GET", "/planner-inputs") => Op::new(
            "Read planner inputs back",
            "A page of planner inputs, each as `POST planner-inputs` takes it.",
            page("planner_inputs", s.of::<crate::accuracy::inputs::PlannerInput>(), string()),
        )
        .q("sku", "Only this item's own row.", string())
        .q("group", "Only this group's default.", string())
        .paged(1000, 200)
        .etag()
        .csv(),
        ("POST", "/planner-inputs") => Op::new("Set planner inputs", "What was written.", written())
            .body(s.list_of::<crate::accuracy::inputs::PlannerInputRecord>(),
                  json!([{ "sku": "KL-1001", "lead_time_days": 5.0, "lead_time_sd_days": 1.5, "review_days": 0.0 }]))
            .errors(BATCH),
        ("GET", "/buffer") => table_view(window(Op::new(
            "Read buffers",
            "Every row the filter keeps (never paged).",
            s.list_of::<crate::accuracy::service::BufferReport>(),
        )))
        .csv(),
        ("GET", "/buffer/{sku}") => window(Op::new(
            "Read one item's buffer",
            "The item's safety stock and order point with every term, and under `counting` the same at other count intervals.",
            s.of::<crate::accuracy::service::BufferReport>(),
        ))
        .q(
            "interval",
            "One more count interval for `counting.rows`, whole days 1 to 730 (JSON only).",
            json!({ "type": "string", "pattern": "^([0-9]{1,3})?$" }),
        )
        .csv(),
        _ => return None,
    };
    Some(op)
}

/// A day parameter of the reports, where an empty value is the same as none.
fn optional_day() -> Value {
    json!({ "type": "string", "pattern": "^([0-9]{4}-[0-9]{2}-[0-9]{2})?$",
            "description": "`YYYY-MM-DD`, a local day of the site; empty is the same as none." })
}

/// Adds a report's period: `since` and `until`.
fn period(op: Op) -> Op {
    op.q("since", "The period's first day.", optional_day()).q(
        "until",
        "The period's last day (default: today).",
        optional_day(),
    )
}

/// Adds the buffer's demand window: its last day and length.
fn window(op: Op) -> Op {
    op.q(
        "until",
        "The demand window's last day (default: yesterday).",
        optional_day(),
    )
    .q(
        "window_days",
        "The demand window in days, 1 to 3,660 (default: the site's).",
        json!({ "type": "string", "pattern": "^([0-9]{1,4})?$" }),
    )
}

/// Adds the long tables' filter and order (their API answers are never paged).
fn table_view(op: Op) -> Op {
    op.q(
        "class",
        "Only this ABC class.",
        json!({ "type": "string", "enum": ["", "A", "B", "C"] }),
    )
    .q("group", "Only this item group.", string())
    .q("q", "Text the SKU or description contains.", string())
    .q("sort", "The column to order by.", string())
    .q(
        "dir",
        "`asc` or `desc`.",
        json!({ "type": "string", "enum": ["", "asc", "desc"] }),
    )
}
