package localpg

import (
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
)

// EnvBinDir names the environment variable that points at the directory
// holding initdb, pg_ctl and postgres. When set it is the only place searched.
const EnvBinDir = "HALFMARK_PG_BIN"

// ErrBinariesNotFound is returned (possibly wrapped) when no directory holds
// the PostgreSQL server binaries.
var ErrBinariesNotFound = errors.New("PostgreSQL server binaries (initdb, pg_ctl) were not found; install PostgreSQL (e.g. `apt-get install postgresql`) or set HALFMARK_DATABASE_URL to an existing database")

// debianRoot holds one bin directory per major version on Debian and Ubuntu
// (/usr/lib/postgresql/15/bin); their initdb is not on PATH.
const debianRoot = "/usr/lib/postgresql"

// sourceBuildDir is where a PostgreSQL built from source installs by default.
const sourceBuildDir = "/usr/local/pgsql/bin"

// serverTools are the programs a directory must hold to be usable.
var serverTools = []string{"initdb", "pg_ctl", "postgres"}

// FindBinaries returns the directory holding the PostgreSQL server programs
// initdb, pg_ctl and postgres. It looks, in order, at $HALFMARK_PG_BIN (and
// nowhere else when that is set), /usr/lib/postgresql/<version>/bin from the
// highest version down, /usr/local/pgsql/bin, and the directories of pg_ctl
// and initdb found on PATH. When none qualifies the error is
// ErrBinariesNotFound.
func FindBinaries() (dir string, err error) {
	return findBinaries(os.Getenv(EnvBinDir), debianRoot, sourceBuildDir, exec.LookPath)
}

func findBinaries(envDir, debRoot, fixedDir string, lookPath func(string) (string, error)) (string, error) {
	if envDir != "" {
		if hasServerTools(envDir) {
			return filepath.Abs(envDir)
		}
		return "", ErrBinariesNotFound
	}
	candidates := versionBinDirs(debRoot)
	candidates = append(candidates, fixedDir)
	for _, tool := range []string{"pg_ctl", "initdb"} {
		if p, err := lookPath(tool); err == nil {
			candidates = append(candidates, filepath.Dir(p))
		}
	}
	for _, dir := range candidates {
		if hasServerTools(dir) {
			return filepath.Abs(dir)
		}
	}
	return "", ErrBinariesNotFound
}

// versionBinDirs lists root/<version>/bin, highest version first, comparing
// versions numerically part by part (so 10 comes before 9.6).
func versionBinDirs(root string) []string {
	entries, err := os.ReadDir(root)
	if err != nil {
		return nil
	}
	type version struct {
		name  string
		parts []int
	}
	var versions []version
	for _, e := range entries {
		if parts, ok := parseVersion(e.Name()); ok {
			versions = append(versions, version{e.Name(), parts})
		}
	}
	slices.SortFunc(versions, func(a, b version) int { return slices.Compare(b.parts, a.parts) })
	dirs := make([]string, len(versions))
	for i, v := range versions {
		dirs[i] = filepath.Join(root, v.name, "bin")
	}
	return dirs
}

func parseVersion(s string) ([]int, bool) {
	fields := strings.Split(s, ".")
	parts := make([]int, len(fields))
	for i, f := range fields {
		n, err := strconv.Atoi(f)
		if err != nil || n < 0 {
			return nil, false
		}
		parts[i] = n
	}
	return parts, true
}

// hasServerTools reports whether dir holds executable initdb, pg_ctl and postgres.
func hasServerTools(dir string) bool {
	for _, tool := range serverTools {
		fi, err := os.Stat(filepath.Join(dir, tool))
		if err != nil || !fi.Mode().IsRegular() || fi.Mode().Perm()&0o111 == 0 {
			return false
		}
	}
	return true
}

// binariesForVersion prefers the installed binaries of the cluster's major
// version (from PG_VERSION) over the newest ones, because a server refuses a
// data directory made by another major version. An explicit $HALFMARK_PG_BIN
// always wins.
func binariesForVersion(found, pgVersion string) string {
	if os.Getenv(EnvBinDir) != "" || pgVersion == "" {
		return found
	}
	if _, ok := parseVersion(pgVersion); !ok {
		return found
	}
	dir := filepath.Join(debianRoot, pgVersion, "bin")
	if hasServerTools(dir) {
		return dir
	}
	return found
}
