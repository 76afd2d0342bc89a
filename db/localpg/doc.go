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
//	dataDir/superuser.password  the superuser's random password (0600)
//	dataDir/app.password        the runtime role's random password (0600)
//
// The server listens only on 127.0.0.1, on a free port (never 5432), and
// asks every client for a password (SCRAM-SHA-256, on TCP and on the unix
// socket). The passwords are random and kept in 0600 files owned by the user
// that runs Halfmark, so another OS user on the machine can reach the port
// but cannot log in. A cluster made by an older version with trust
// authentication is moved to passwords at its next Open.
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
