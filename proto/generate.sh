#!/usr/bin/env bash
# Regenerates the Go code of the wire schemas. The protoc plugins are the
# versions pinned as tool directives in go.mod; protoc itself comes from
# Debian's protobuf-compiler package (apt-get install protobuf-compiler).
set -euo pipefail
cd "$(dirname "$0")"
command -v protoc >/dev/null || { echo "generate.sh: protoc not found; apt-get install protobuf-compiler" >&2; exit 1; }
gen_go=$(go tool -n protoc-gen-go)
gen_grpc=$(go tool -n protoc-gen-go-grpc)
protoc \
  --plugin=protoc-gen-go="$gen_go" \
  --plugin=protoc-gen-go-grpc="$gen_grpc" \
  -I . \
  --go_out=. --go_opt=paths=source_relative \
  --go-grpc_out=. --go-grpc_opt=paths=source_relative \
  bunchsieve/v1/*.proto
