package main

import (
	"context"
	"fmt"
	"net/http"
	"time"

	"halfmark/db"
)

// cmdProbe is a health check for containers without curl: `probe URL`
// exits 0 when the URL answers 200; `probe --database` when the configured
// database answers.
func cmdProbe(ctx context.Context, e env) error {
	var d dbFlags
	fs := newFlags(e, "probe", "probe URL | probe --database")
	checkDB := fs.Bool("database", false, "check that the configured database answers instead of a URL")
	d.register(fs)
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	ctx, cancel := context.WithTimeout(ctx, 5*time.Second)
	defer cancel()
	if *checkDB {
		url := d.url
		if url == "" {
			url = e.getenv("DATABASE_URL")
		}
		if url == "" {
			return exitUsage{fmt.Errorf("--database needs HALFMARK_DATABASE_URL")}
		}
		st, err := db.Open(ctx, url)
		if err != nil {
			return err
		}
		st.Close()
		return nil
	}
	if fs.NArg() != 1 {
		return exitUsage{fmt.Errorf("give a URL, e.g. http://127.0.0.1:8080/readyz")}
	}
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, fs.Arg(0), nil)
	if err != nil {
		return exitUsage{err}
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return err
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		return fmt.Errorf("%s answered %d", fs.Arg(0), resp.StatusCode)
	}
	return nil
}
