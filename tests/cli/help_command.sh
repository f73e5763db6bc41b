# help_command.sh - `sluice help COMMAND` prints the same text as
# `sluice COMMAND --help` (exit 0, stdout) for every command the usage lists;
# an unknown command is a usage error (exit 64) naming it.
# usage: bash help_command.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

cmds=$("$SLUICE" --help | awk '/^commands:/ {on = 1; next} on && /^  [a-z]/ {print $1} on && /^$/ {exit}')
n=0
for c in $cmds; do
    [ "$c" = help ] && continue
    n=$((n + 1))
    "$SLUICE" help "$c" > "$W/a.txt" 2> "$W/a.err"; ra=$?
    "$SLUICE" "$c" --help > "$W/b.txt" 2> /dev/null; rb=$?
    if [ $ra -eq 0 ] && [ $rb -eq 0 ] && [ -s "$W/a.txt" ] && cmp -s "$W/a.txt" "$W/b.txt" \
        && grep -q "usage: sluice $c" "$W/a.txt"; then
        note_ok "help $c = $c --help"
    else
        note_fail "help $c = $c --help" "exit $ra/$rb, $(wc -c < "$W/a.txt")/$(wc -c < "$W/b.txt") bytes"
    fi
done
if [ "$n" -ge 12 ]; then note_ok "the usage lists $n commands"; else note_fail "the usage lists $n commands (< 12)"; fi
expect "help of an unknown command" --code 64 --err "unknown command 'sovle'" -- "$SLUICE" help sovle
expect "help alone prints the usage" --code 0 --out "help COMMAND" -- "$SLUICE" help
sl_finish
