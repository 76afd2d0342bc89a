package localpg

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"os/exec"
	"os/user"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
)

// serverUser is the OS account that runs a new cluster when the caller is root.
const serverUser = "postgres"

// runner runs the PostgreSQL programs as the OS user that owns the cluster.
type runner struct {
	cred *syscall.Credential // nil: run as the calling process's user
	name string              // user name, for messages
	home string              // home directory given to children when cred is set
}

// chooseRunner picks who runs initdb/pg_ctl/postgres for the cluster in
// pgdata. As a normal user that is the caller, who must own an existing
// cluster. As root it is the owner of an existing cluster, or the "postgres"
// OS user for a new one, because initdb and postgres refuse to run as root.
func chooseRunner(pgdata string) (runner, error) {
	euid := os.Geteuid()
	owner := -1
	if fi, err := os.Stat(pgdata); err == nil {
		owner = int(fi.Sys().(*syscall.Stat_t).Uid)
	}
	if euid != 0 {
		if owner >= 0 && owner != euid {
			return runner{}, fmt.Errorf("cluster directory %s belongs to uid %d, not to this user (uid %d): run as that user or as root, or choose another data directory", pgdata, owner, euid)
		}
		return runner{}, nil
	}
	var u *user.User
	var err error
	switch {
	case owner == 0:
		return runner{}, fmt.Errorf("cluster directory %s is owned by root, but PostgreSQL refuses to run as root: `chown -R %s %s` or remove it", pgdata, serverUser, pgdata)
	case owner > 0:
		if u, err = user.LookupId(strconv.Itoa(owner)); err != nil {
			u = &user.User{Uid: strconv.Itoa(owner), Username: "uid " + strconv.Itoa(owner), HomeDir: "/"}
			if fi, err := os.Stat(pgdata); err == nil {
				u.Gid = strconv.Itoa(int(fi.Sys().(*syscall.Stat_t).Gid))
			}
		}
	default:
		if u, err = user.Lookup(serverUser); err != nil {
			return runner{}, fmt.Errorf("running as root needs the %q OS user to run the private PostgreSQL cluster (initdb refuses to run as root), but looking it up failed: %v; create it (e.g. `useradd --system --home-dir /var/lib/postgresql %s`), run as a normal user, or set HALFMARK_DATABASE_URL", serverUser, err, serverUser)
		}
	}
	uid, err1 := strconv.ParseUint(u.Uid, 10, 32)
	gid, err2 := strconv.ParseUint(u.Gid, 10, 32)
	if err1 != nil || err2 != nil {
		return runner{}, fmt.Errorf("OS user %q has a non-numeric uid %q or gid %q", u.Username, u.Uid, u.Gid)
	}
	if uid == 0 {
		return runner{}, fmt.Errorf("OS user %q has uid 0, but PostgreSQL refuses to run as root", u.Username)
	}
	return runner{
		cred: &syscall.Credential{Uid: uint32(uid), Gid: uint32(gid)},
		name: u.Username,
		home: u.HomeDir,
	}, nil
}

// command prepares name to run as the runner's user with working directory
// dir (which that user must be able to enter).
func (r runner) command(ctx context.Context, dir, name string, args ...string) *exec.Cmd {
	var cmd *exec.Cmd
	if ctx == nil {
		cmd = exec.Command(name, args...)
	} else {
		cmd = exec.CommandContext(ctx, name, args...)
	}
	cmd.Dir = dir
	cmd.Env = r.env()
	if r.cred != nil {
		cmd.SysProcAttr = &syscall.SysProcAttr{Credential: r.cred}
	}
	return cmd
}

// env is the caller's environment without PG* variables (PGPORT, PGDATA and
// friends would change what the programs do), with C-locale messages so log
// lines can be recognised, and the runner's HOME.
func (r runner) env() []string {
	var env []string
	for _, kv := range os.Environ() {
		if strings.HasPrefix(kv, "PG") || strings.HasPrefix(kv, "LC_") || strings.HasPrefix(kv, "LANG=") || strings.HasPrefix(kv, "LANGUAGE=") {
			continue
		}
		if r.cred != nil && (strings.HasPrefix(kv, "HOME=") || strings.HasPrefix(kv, "USER=") || strings.HasPrefix(kv, "LOGNAME=")) {
			continue
		}
		env = append(env, kv)
	}
	env = append(env, "LC_ALL=C")
	if r.cred != nil {
		env = append(env, "HOME="+r.home, "USER="+r.name, "LOGNAME="+r.name)
	}
	return env
}

// chown gives path to the runner's user; a no-op when running as the caller.
func (r runner) chown(path string) error {
	if r.cred == nil {
		return nil
	}
	return os.Lchown(path, int(r.cred.Uid), int(r.cred.Gid))
}

// chownTree gives every entry under root that belongs to someone else to the
// runner's user (PostgreSQL stops on a file it cannot open).
func (r runner) chownTree(root string) error {
	if r.cred == nil {
		return nil
	}
	return filepath.WalkDir(root, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		info, err := d.Info()
		if err != nil {
			return err
		}
		st := info.Sys().(*syscall.Stat_t)
		if st.Uid == r.cred.Uid && st.Gid == r.cred.Gid {
			return nil
		}
		return r.chown(path)
	})
}

// canEnter reports whether the runner's user can make dir its working
// directory, by starting a harmless program (postgres -V) there as that user:
// the kernel's own check, so modes, ACLs and security modules all count.
func (r runner) canEnter(bin, dir string) bool {
	cmd := r.command(nil, dir, filepath.Join(bin, "postgres"), "-V")
	cmd.Stdout, cmd.Stderr = io.Discard, io.Discard
	return cmd.Run() == nil
}

// ensureTraversable makes sure the runner's user can reach dir. Each path
// component it cannot enter gets a POSIX ACL entry granting that user search
// (x) permission only; where the file system has no ACLs, a directory that
// Open created itself gets o+x instead, and any other directory is reported
// with the commands that would fix it.
func (r runner) ensureTraversable(bin, dir string, created map[string]bool, logw io.Writer) error {
	if r.cred == nil || r.canEnter(bin, dir) {
		return nil
	}
	for _, p := range pathPrefixes(dir) {
		if r.canEnter(bin, p) {
			continue
		}
		aclErr := grantSearch(p, r.cred.Uid)
		if aclErr == nil && r.canEnter(bin, p) {
			fmt.Fprintf(logw, "localpg: gave OS user %s search permission on %s (ACL u:%s:x) so PostgreSQL can reach its data directory\n", r.name, p, r.name)
			continue
		}
		if created[p] {
			if fi, err := os.Stat(p); err == nil {
				if err := os.Chmod(p, fi.Mode().Perm()|0o001); err == nil && r.canEnter(bin, p) {
					continue
				}
			}
		}
		why := "the ACL could not be set"
		if aclErr != nil {
			why = "setting an ACL failed: " + aclErr.Error()
		}
		return fmt.Errorf("the OS user %s, which runs PostgreSQL, cannot enter %s (%s); allow it with `setfacl -m u:%s:x %s` or `chmod o+x %s`, or choose a data directory it can reach (e.g. under /var/lib/halfmark)", r.name, p, why, r.name, p, p)
	}
	if !r.canEnter(bin, dir) {
		return fmt.Errorf("the OS user %s, which runs PostgreSQL, cannot enter %s; check its permissions", r.name, dir)
	}
	return nil
}

// pathPrefixes lists "/", "/a", "/a/b" for "/a/b".
func pathPrefixes(dir string) []string {
	dir = filepath.Clean(dir)
	prefixes := []string{string(filepath.Separator)}
	for i := 1; i < len(dir); i++ {
		if dir[i] == filepath.Separator {
			prefixes = append(prefixes, dir[:i])
		}
	}
	if dir != string(filepath.Separator) {
		prefixes = append(prefixes, dir)
	}
	return prefixes
}

// mkdirAllTracked is os.MkdirAll that also returns the directories it created.
func mkdirAllTracked(dir string, perm fs.FileMode) (map[string]bool, error) {
	created := map[string]bool{}
	var missing []string
	for p := filepath.Clean(dir); ; p = filepath.Dir(p) {
		fi, err := os.Stat(p)
		if err == nil {
			if !fi.IsDir() {
				return nil, fmt.Errorf("%s is not a directory", p)
			}
			break
		}
		if !errors.Is(err, fs.ErrNotExist) {
			return nil, err
		}
		missing = append(missing, p)
		if p == filepath.Dir(p) {
			break
		}
	}
	for i := len(missing) - 1; i >= 0; i-- {
		if err := os.Mkdir(missing[i], perm); err != nil && !errors.Is(err, fs.ErrExist) {
			return nil, err
		}
		created[missing[i]] = true
	}
	return created, nil
}
