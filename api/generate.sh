#!/usr/bin/env bash
# Regenerates the Go (and Python) code from api/gliss/v1/*.proto.
# Plugin versions are pinned here; protoc comes from Debian's protobuf-compiler,
# grpc_python_plugin from protobuf-compiler-grpc.
#   api/generate.sh          regenerate in place
#   api/generate.sh --check  regenerate into a temporary tree and fail if the committed code differs
set -euo pipefail
PROTOC_GEN_GO_VERSION=v1.36.12
PROTOC_GEN_GO_GRPC_VERSION=v1.5.1

root=$(cd "$(dirname "$0")/.." && pwd)
gobin=$(go env GOPATH)/bin
need() { [ -x "$gobin/$1" ] && "$gobin/$1" --version 2>&1 | grep -q "${2#v}"; }
need protoc-gen-go "$PROTOC_GEN_GO_VERSION" || go install "google.golang.org/protobuf/cmd/protoc-gen-go@$PROTOC_GEN_GO_VERSION"
need protoc-gen-go-grpc "$PROTOC_GEN_GO_GRPC_VERSION" || go install "google.golang.org/grpc/cmd/protoc-gen-go-grpc@$PROTOC_GEN_GO_GRPC_VERSION"
export PATH="$gobin:$PATH"

out="$root"
if [ "${1:-}" = "--check" ]; then
  out=$(mktemp -d)
  trap 'rm -rf "$out"' EXIT
  mkdir -p "$out/api/gliss/v1" "$out/client/python/gliss/v1"
fi

cd "$root/api"
protoc -I . -I /usr/include \
  --go_out="$out/api" --go_opt=paths=source_relative \
  --go-grpc_out="$out/api" --go-grpc_opt=paths=source_relative \
  gliss/v1/*.proto

if command -v grpc_python_plugin >/dev/null 2>&1; then
  mkdir -p "$out/client/python/gliss/v1"
  protoc -I . -I /usr/include \
    --python_out="$out/client/python" \
    --grpc_python_out="$out/client/python" --plugin=protoc-gen-grpc_python="$(command -v grpc_python_plugin)" \
    gliss/v1/*.proto
fi

if [ "${1:-}" = "--check" ]; then
  status=0
  for f in "$out"/api/gliss/v1/*.go; do
    rel=${f#"$out/"}
    cmp -s "$f" "$root/$rel" || { echo "stale generated code: $rel (run api/generate.sh)" >&2; status=1; }
  done
  for f in "$root"/api/gliss/v1/*.go; do
    rel=${f#"$root/"}
    [ -e "$out/$rel" ] || { echo "generated file without a proto: $rel" >&2; status=1; }
  done
  if [ -d "$out/client/python/gliss/v1" ] && ls "$out"/client/python/gliss/v1/*.py >/dev/null 2>&1; then
    for f in "$out"/client/python/gliss/v1/*.py; do
      rel=${f#"$out/"}
      cmp -s "$f" "$root/$rel" || { echo "stale generated code: $rel (run api/generate.sh)" >&2; status=1; }
    done
  fi
  [ $status -eq 0 ] && echo "generated code is up to date"
  exit $status
fi
