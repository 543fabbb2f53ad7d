#!/usr/bin/env bash
# Breaking-change check of the protobuf API (buf breaking, rules from buf.yaml).
#
# What it compares against, in order:
#   1. $BUF_BREAKING_AGAINST when set (any buf input, e.g. '.git#tag=v1.2.0');
#   2. HEAD, when proto/ has uncommitted changes (a developer checking their edit);
#   3. otherwise the previous commit, HEAD~1 (CI checks the submitted commit).
# It skips, with a message, when there is nothing to compare against: the reference
# commit is missing (first commit, or a shallow clone) or has no API yet.
set -euo pipefail
buf="${BUF:-tools/node_modules/.bin/buf}"

if [ -n "${BUF_BREAKING_AGAINST:-}" ]; then
  exec "$buf" breaking --against "$BUF_BREAKING_AGAINST"
fi
if ! git rev-parse --is-inside-work-tree >/dev/null 2>&1; then
  echo "buf breaking: skipped (not a git work tree)"; exit 0
fi
ref=HEAD~1
if ! git diff --quiet HEAD -- proto buf.yaml 2>/dev/null || [ -n "$(git ls-files --others --exclude-standard -- proto)" ]; then
  ref=HEAD
fi
commit=$(git rev-parse -q --verify "$ref^{commit}" 2>/dev/null || true)
if [ -z "$commit" ]; then
  echo "buf breaking: skipped ($ref does not exist here: first commit or shallow clone)"; exit 0
fi
if ! git cat-file -e "$commit:buf.yaml" 2>/dev/null || [ -z "$(git ls-tree -r --name-only "$commit" -- proto | grep '\.proto$' || true)" ]; then
  echo "buf breaking: skipped ($ref has no protobuf API yet)"; exit 0
fi
# Export the reference tree into a temporary directory: this works in shallow clones
# and needs no git support inside buf.
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
git archive "$commit" buf.yaml proto | tar -x -C "$tmp"
echo "buf breaking: against $ref ($(git rev-parse --short "$commit"))"
"$buf" breaking --against "$tmp"
