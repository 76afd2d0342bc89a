package main

import (
	"context"
	"fmt"
)

func cmdMigrate(ctx context.Context, e env) error {
	var d dbFlags
	fs := newFlags(e, "migrate", "migrate [flags]")
	d.register(fs)
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
