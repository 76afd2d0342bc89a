# Halfmark — targets people expect. Tests need PostgreSQL: set
# HALFMARK_TEST_DATABASE_URL to a server where throw-away databases may be
# created, or leave it unset to let each test binary start a private
# cluster from the installed PostgreSQL binaries.
GO ?= go

.PHONY: run demo test race fuzz bench build

build:
	$(GO) build -o bin/halfmark ./cmd/halfmark

run:
	$(GO) run ./cmd/halfmark serve

demo:
	$(GO) run ./cmd/halfmark demo

test:
	$(GO) vet ./...
	$(GO) test -count=1 -timeout 15m ./...
	$(GO) test -count=1 -race -timeout 10m ./db/... ./worker/...

fuzz:
	./deploy/fuzz.sh 10s

bench:
	./deploy/bench.sh
