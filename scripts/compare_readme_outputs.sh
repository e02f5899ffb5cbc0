#!/usr/bin/env bash
# Runs every `cargo run -- ...` command of the README with two ratepool
# binaries (for example one built before a redesign and one after), each in
# its own scratch folder beside the demo data, in README order, and compares
# every file the commands write, byte for byte.
#
#   scripts/compare_readme_outputs.sh OLD_BINARY NEW_BINARY
#
# Exit 0 when every output is identical; 1 (with the differing files) otherwise.
set -euo pipefail
old="$(realpath "$1")"
new="$(realpath "$2")"
root="$(cd "$(dirname "$0")/.." && pwd)"
mapfile -t commands < <(grep -o 'cargo run -- [^`]*' "$root/README.md" | sed 's/^cargo run -- //')
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
[[ -n "${KEEP:-}" ]] && trap - EXIT && echo "outputs kept in $work"
for side in old new; do
  mkdir -p "$work/$side"
  ln -s "$root/demo-data" "$work/$side/demo-data"
done
status=0
for i in "${!commands[@]}"; do
  read -r -a args <<<"${commands[$i]}"
  for side in old new; do
    binary="${!side}"
    (cd "$work/$side" && "$binary" --quiet "${args[@]}" >"stdout-$i.txt" 2>"stderr-$i.txt")
  done
done
while IFS= read -r file; do
  if ! cmp -s "$work/old/$file" "$work/new/$file"; then
    echo "differs: $file"
    status=1
  fi
done < <(cd "$work/old" && find . -type f | sort)
count="$(cd "$work/old" && find . -type f | wc -l)"
echo "${#commands[@]} README commands, $count files compared"
exit "$status"
