#!/usr/bin/env bash
# Checks the deployment files with the tools this machine has. Each check says
# whether it ran, so a skipped one is never mistaken for a pass.
#   bash deploy/check.sh            (from the repository root; CAIRN_BIN=path/to/cairn optional)
set -uo pipefail
cd "$(dirname "$0")"
failed=0
pass() { echo "ok      $*"; }
fail() { echo "FAILED  $*"; failed=1; }
skip() { echo "skipped $*"; }

# --- systemd units ----------------------------------------------------------------
if command -v systemd-analyze >/dev/null 2>&1; then
    # verify resolves ExecStart binaries: point it at the built cairn through a temporary
    # copy of the units with the path replaced.
    bin="${CAIRN_BIN:-}"
    [ -z "$bin" ] && for c in ../target/debug/cairn ../target/release/cairn \
        "${CARGO_TARGET_DIR:-/nonexistent}/debug/cairn"; do [ -x "$c" ] && bin="$c" && break; done
    tmp=$(mktemp -d)
    trap 'rm -rf "$tmp"' EXIT
    for u in cairn.service cairn-backup.service cairn-backup.timer; do
        if [ -n "$bin" ]; then
            sed "s#/usr/local/bin/cairn#$(realpath "$bin")#" "systemd/$u" >"$tmp/$u"
        else
            cp "systemd/$u" "$tmp/$u"
        fi
    done
    out=$(cd "$tmp" && systemd-analyze verify --man=no ./cairn.service ./cairn-backup.service ./cairn-backup.timer 2>&1)
    # Lines about the machine itself (no running systemd in a container) are not about our files.
    own=$(printf '%s\n' "$out" | grep -E 'cairn' | grep -v -E 'Failed to (connect|prepare)|Unit .* not found|System has not been booted')
    if [ -z "$own" ]; then pass "systemd-analyze verify (cairn.service, cairn-backup.service, cairn-backup.timer)"
    else fail "systemd-analyze verify:"; printf '%s\n' "$own"; fi
    # `security` needs a running systemd for loaded units; offline it reads the file.
    if score=$(systemd-analyze security --offline=yes --no-pager "$tmp/cairn.service" 2>/dev/null | tail -1); then
        echo "        systemd-analyze security: $score"
        case "$score" in *" OK "*|*"SAFE"*) pass "exposure level of cairn.service is OK or better";;
            *) fail "exposure level of cairn.service: $score";; esac
    else skip "systemd-analyze security --offline (not supported by this systemd)"; fi
else
    skip "systemd-analyze (not installed): checking the units' hardening lines by hand"
fi
for key in User=cairn ProtectSystem=strict StateDirectory=cairn NoNewPrivileges=yes \
    CapabilityBoundingSet= PrivateTmp=yes KillSignal=SIGTERM; do
    grep -qx "$key" systemd/cairn.service && pass "cairn.service has $key" || fail "cairn.service lacks $key"
done
grep -q '^ReadWritePaths=/var/backups/cairn' systemd/cairn-backup.service \
    && pass "cairn-backup.service may write only its backup folder besides the state" \
    || fail "cairn-backup.service lacks ReadWritePaths=/var/backups/cairn"

# --- the settings files parse as Cairn's config ------------------------------------
bin="${CAIRN_BIN:-${bin:-}}"
if [ -n "$bin" ] && [ -x "$bin" ]; then
    for f in systemd/cairn.toml container/cairn.toml; do
        if out=$("$bin" config check "$f" 2>&1); then pass "$f is a valid Cairn config"
        else fail "$f: $out"; fi
    done
else skip "config files (no cairn binary; set CAIRN_BIN)"; fi

# --- container file -----------------------------------------------------------------
cf=container/Containerfile
stages=$(grep -cE '^FROM .+ AS [a-z]+$' "$cf")
[ "$stages" -ge 2 ] && pass "Containerfile is multi-stage ($stages stages)" || fail "Containerfile has $stages named stages"
last_from=$(grep -nE '^FROM ' "$cf" | tail -1 | cut -d: -f1)
user_line=$(grep -nE '^USER ' "$cf" | tail -1 | cut -d: -f1)
if [ -n "$user_line" ] && [ "$user_line" -gt "$last_from" ] && ! grep -qE '^USER +(root|0)(:|$)' "$cf"; then
    pass "the run stage switches to a non-root USER"
else fail "the run stage has no non-root USER after its FROM"; fi
grep -qE '^VOLUME \["/var/lib/cairn"\]' "$cf" && pass "the data directory is a VOLUME" || fail "no VOLUME for /var/lib/cairn"
grep -qE '^HEALTHCHECK ' "$cf" && grep -qE 'CMD \[.*"probe", "http://127.0.0.1:8080/readyz"\]' "$cf" && pass "HEALTHCHECK probes /readyz" || fail "no HEALTHCHECK on /readyz"
if grep -nE '^(ENV|ARG).*(PASSWORD|SECRET|TOKEN|PIN)' "$cf"; then fail "Containerfile bakes a secret into the image"
else pass "no secrets in ENV/ARG"; fi
# Every COPY source of the build context exists.
while read -r src; do
    [ -e "../$src" ] && pass "COPY source $src exists" || fail "COPY source $src is missing"
done < <(grep -E '^COPY [^-]' "$cf" | awk '{print $2}' | grep -v '^\.$')
# Instructions are all known ones (a typo would fail the build).
bad=$(grep -vE '^(#|$| |FROM|WORKDIR|RUN|COPY|ENV|USER|VOLUME|EXPOSE|STOPSIGNAL|HEALTHCHECK|ENTRYPOINT|CMD|ARG|LABEL)' "$cf")
[ -z "$bad" ] && pass "every Containerfile instruction is a known one" || { fail "unknown instructions:"; echo "$bad"; }
if command -v docker >/dev/null 2>&1 && docker info >/dev/null 2>&1; then
    (cd .. && docker build -f deploy/container/Containerfile -t cairn:check .) \
        && pass "docker build" || fail "docker build"
else skip "docker build (no container engine running here)"; fi

# --- reverse proxy --------------------------------------------------------------------
if command -v caddy >/dev/null 2>&1; then
    if out=$(caddy validate --config proxy/Caddyfile --adapter caddyfile 2>&1); then pass "caddy validate proxy/Caddyfile"
    else fail "caddy validate:"; printf '%s\n' "$out" | tail -5; fi
else skip "caddy validate (caddy not installed: apt-get install caddy)"; fi
grep -qE 'respond @internal 404' proxy/Caddyfile && pass "the proxy hides /metrics and /readyz" || fail "the proxy exposes /metrics"

exit $failed
