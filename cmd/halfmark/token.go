package main

import (
	"context"
	"fmt"
	"strconv"
	"text/tabwriter"

	"halfmark"
)

func cmdToken(ctx context.Context, e env) error {
	if len(e.args) == 0 || e.args[0] == "--help" || e.args[0] == "-h" {
		fmt.Fprintln(e.stdout, "Usage: halfmark token create --name N --role therapist|physicist|admin\n       halfmark token list\n       halfmark token revoke ID")
		if len(e.args) == 0 {
			return exitUsage{fmt.Errorf("say create, list or revoke")}
		}
		return errHelp
	}
	sub := e.args[0]
	e.args = e.args[1:]
	var d dbFlags
	var name, role string
	fs := newFlags(e, "token "+sub, "token "+sub+" [flags]")
	d.register(fs)
	if sub == "create" {
		fs.StringVar(&name, "name", "", "a name that says who or what uses the token, e.g. console-linac-a")
		fs.StringVar(&role, "role", "", "therapist, physicist or admin")
	}
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	switch sub {
	case "create":
		if name == "" || !halfmark.Role(role).Valid() {
			return exitUsage{fmt.Errorf("give --name and --role therapist|physicist|admin")}
		}
	case "list":
	case "revoke":
		if fs.NArg() != 1 {
			return exitUsage{fmt.Errorf("give the token id to revoke (see halfmark token list)")}
		}
	default:
		return exitUsage{fmt.Errorf("unknown token command %q: use create, list or revoke", sub)}
	}
	st, err := openStore(ctx, e, d, e.stderr)
	if err != nil {
		return err
	}
	defer st.Close()
	a := halfmark.CLIActor("token")
	switch sub {
	case "create":
		t, secret, err := st.CreateToken(ctx, a, name, halfmark.Role(role))
		if err != nil {
			return err
		}
		fmt.Fprintf(e.stdout, "created token %d %q with role %s; the secret is shown once, on the next line:\n%s\n", t.ID, t.Name, t.Role, secret)
	case "list":
		ts, err := st.Tokens(ctx)
		if err != nil {
			return err
		}
		tw := tabwriter.NewWriter(e.stdout, 2, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "ID\tNAME\tROLE\tCREATED\tREVOKED")
		for _, t := range ts {
			rev := "-"
			if t.RevokedAt != nil {
				rev = t.RevokedAt.Format("2006-01-02 15:04")
			}
			fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%s\n", t.ID, t.Name, t.Role, t.CreatedAt.Format("2006-01-02 15:04"), rev)
		}
		return tw.Flush()
	case "revoke":
		id, err := strconv.ParseInt(fs.Arg(0), 10, 64)
		if err != nil {
			return exitUsage{fmt.Errorf("token id %q is not a number", fs.Arg(0))}
		}
		if err := st.RevokeToken(ctx, a, id); err != nil {
			return err
		}
		fmt.Fprintf(e.stdout, "token %d revoked\n", id)
	}
	return nil
}
