package localpg

// Option changes how Open creates and starts a cluster.
type Option func(*options)

type options struct {
	throwaway bool // server is a child of this process and dies with it
	noSync    bool // initdb --no-sync, fsync=off, synchronous_commit=off, full_page_writes=off
}

// Throwaway makes a cluster for data nobody needs after the process ends
// (tests): initdb skips its final sync, the server runs with fsync,
// synchronous_commit and full_page_writes off, and it is started as a child
// of this process (not through pg_ctl) that receives SIGQUIT, PostgreSQL's
// immediate shutdown, if the process dies without calling Stop (Linux).
// A crash of the machine may corrupt such a cluster.
func Throwaway() Option {
	return func(o *options) { o.throwaway, o.noSync = true, true }
}

// withNoSync speeds up tests of the ordinary (pg_ctl) path.
func withNoSync() Option {
	return func(o *options) { o.noSync = true }
}
