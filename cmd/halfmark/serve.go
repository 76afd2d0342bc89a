package main

import (
	"context"
	"errors"
	"fmt"
	"net"
	"net/http"
	"time"

	"halfmark/api"
)

// serveFlags are shared by serve, api and worker.
type serveFlags struct {
	addr   string
	db     dbFlags
	log    logFlags
	worker workerFlags
}

func cmdServe(ctx context.Context, e env) error  { return serveParts(ctx, e, "serve", true, true) }
func cmdAPI(ctx context.Context, e env) error    { return serveParts(ctx, e, "api", true, false) }
func cmdWorker(ctx context.Context, e env) error { return serveParts(ctx, e, "worker", false, true) }

func serveParts(ctx context.Context, e env, name string, withHTTP, withWorker bool) error {
	var f serveFlags
	fs := newFlags(e, name, name+" [flags]")
	fs.StringVar(&f.addr, "addr", "127.0.0.1:8080", "listening address of the API and dashboard")
	f.db.register(fs)
	f.log.register(fs)
	f.worker.register(fs, name == "worker")
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	log, err := f.log.logger(e.stderr)
	if err != nil {
		return err
	}
	st, err := openStore(ctx, e, f.db, e.stderr)
	if err != nil {
		return err
	}
	defer st.Close()
	wk, err := f.worker.build(e, st, log)
	if err != nil {
		return err
	}
	if f.worker.once {
		return wk.RunOnce(ctx)
	}

	errc := make(chan error, 2)
	var srv *http.Server
	if withHTTP {
		ln, err := net.Listen("tcp", f.addr)
		if err != nil {
			return fmt.Errorf("listen on %s: %w (is another halfmark running? choose another --addr)", f.addr, err)
		}
		h := api.New(api.Services{Machines: st, Checks: st, Series: st, Auth: st, Audit: st, Pinger: st, Log: log,
			Alerts: st, Status: st, Events: st, Charts: wk})
		srv = &http.Server{Handler: h, ReadHeaderTimeout: 10 * time.Second, ReadTimeout: 60 * time.Second}
		fmt.Fprintf(e.stdout, "Halfmark is listening on http://%s (API under /api/v1)\n", ln.Addr())
		go func() { errc <- srv.Serve(ln) }()
	}
	wdone := make(chan struct{})
	if withWorker {
		go func() {
			defer close(wdone)
			if err := wk.Start(ctx); err != nil {
				errc <- err
			}
		}()
	} else {
		go wk.ReloadOnSIGHUP(ctx) // charts use the book: reload it, and do not die of SIGHUP
		close(wdone)
	}
	log.Info("started", "command", name)
	select {
	case <-ctx.Done():
		log.Info("shutting down")
	case err := <-errc:
		if !errors.Is(err, http.ErrServerClosed) {
			return err
		}
	}
	if srv != nil {
		sctx, cancel := context.WithTimeout(context.Background(), 15*time.Second)
		defer cancel()
		_ = srv.Shutdown(sctx)
	}
	<-wdone // the schedule stops after its running jobs finish
	return nil
}
