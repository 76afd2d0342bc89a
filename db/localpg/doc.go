// Package localpg runs a private PostgreSQL cluster for Halfmark when no
// database URL is configured (the "embedded default").
//
// It uses the PostgreSQL server binaries installed on the machine (see
// FindBinaries) and keeps everything under one data directory:
//
//	dataDir/pgdata/         the cluster, owned by the OS user that runs postgres
//	dataDir/postgres.log    server log (appended to on every start)
//	dataDir/socket/         unix socket directory (sockets are disabled when the path is too long)
//	dataDir/halfmark.lock   flock(2) lock held while a process checks, initialises or starts the cluster
//	dataDir/halfmark-port   TCP port of the last start, reused when still free
//
// The server listens only on 127.0.0.1, on a free port (never 5432), with
// trust authentication for the superuser "postgres": anyone who can open a TCP
// connection to 127.0.0.1 on this machine can use it, so it suits a single-user
// workstation or a container, not a shared host.
//
// initdb and postgres refuse to run as root, so when the calling process runs
// as root the binaries run as the owner of an existing cluster or, for a new
// one, as the "postgres" OS user; the directories the server needs are
// chowned to that user, and a parent directory that user cannot enter (such as
// /root, mode 0700 on Debian) gets a POSIX ACL entry giving that one user
// search (x) permission.
//
// A second Open of a running cluster joins it: the returned Cluster is not
// Owned and its Stop does nothing, so a "migrate" command can run while
// "serve" runs. The cluster lives as long as its owner: when the owner stops
// it, joined users lose their connections.
package localpg
