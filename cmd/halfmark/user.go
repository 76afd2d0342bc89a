package main

import (
	"bufio"
	"context"
	"crypto/rand"
	"encoding/base64"
	"fmt"
	"strings"

	"halfmark"
)

// cmdUser adds dashboard users. The password comes from the first line of
// standard input (--password-stdin) or is generated and printed once.
func cmdUser(ctx context.Context, e env) error {
	if len(e.args) == 0 || e.args[0] == "--help" || e.args[0] == "-h" {
		fmt.Fprintln(e.stdout, "Usage: halfmark user add --email E --role therapist|physicist|admin [--password-stdin]")
		if len(e.args) == 0 {
			return exitUsage{fmt.Errorf("say add")}
		}
		return errHelp
	}
	if e.args[0] != "add" {
		return exitUsage{fmt.Errorf("unknown user command %q: use add", e.args[0])}
	}
	e.args = e.args[1:]
	var d dbFlags
	var email, role string
	var fromStdin bool
	fs := newFlags(e, "user add", "user add --email E --role R [flags]")
	d.register(fs)
	fs.StringVar(&email, "email", "", "the user's e-mail address (the sign-in name)")
	fs.StringVar(&role, "role", "", "therapist, physicist or admin")
	fs.BoolVar(&fromStdin, "password-stdin", false, "read the password from the first line of standard input; otherwise one is generated and printed once")
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	if email == "" || !halfmark.Role(role).Valid() {
		return exitUsage{fmt.Errorf("give --email and --role therapist|physicist|admin")}
	}
	password, generated := "", false
	if fromStdin {
		line, err := bufio.NewReader(e.stdin).ReadString('\n')
		password = strings.TrimRight(line, "\r\n")
		if password == "" && err != nil {
			return exitUsage{fmt.Errorf("--password-stdin: no password on standard input")}
		}
	} else {
		buf := make([]byte, 15)
		if _, err := rand.Read(buf); err != nil {
			return err
		}
		password, generated = base64.RawURLEncoding.EncodeToString(buf), true
	}
	st, err := openStore(ctx, e, d, e.stderr)
	if err != nil {
		return err
	}
	defer st.Close()
	u, err := st.CreateUser(ctx, halfmark.CLIActor("user"), email, halfmark.Role(role), password)
	if err != nil {
		return err
	}
	fmt.Fprintf(e.stdout, "created user %d %s with role %s\n", u.ID, u.Email, u.Role)
	if generated {
		fmt.Fprintf(e.stdout, "the password is shown once, on the next line:\n%s\n", password)
	}
	return nil
}
