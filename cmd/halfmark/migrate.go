package main

import (
	"context"
	"fmt"
)

func cmdMigrate(ctx context.Context, e env) error {
	d := dbFlags{migrating: true}
	fs := newFlags(e, "migrate", "migrate [flags]")
	d.register(fs)
	fs.StringVar(&d.appPassword, "app-password", "", "password to set for the runtime role (--app-role); empty: leave it as it is")
	fs.StringVar(&d.ownerURL, "owner-database-url", "", "PostgreSQL URL of the schema owner to migrate with; empty: --database-url")
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	st, err := openStore(ctx, e, d, e.stdout)
	if err != nil {
		return err
	}
	st.Close()
	fmt.Fprintln(e.stdout, "the database schema is up to date")
	return nil
}
