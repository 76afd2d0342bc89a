package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"time"

	"halfmark"
	"halfmark/api"
	"halfmark/db"
	"halfmark/web"
	"halfmark/worker"
)

// serveFlags are shared by serve, api, worker and demo.
type serveFlags struct {
	addr           string
	metricsAddr    string
	trustedProxies string
	db             dbFlags
	log            logFlags
	worker         workerFlags
}

func (f *serveFlags) register(e env, name string) *flag.FlagSet {
	fs := newFlags(e, name, name+" [flags]")
	fs.StringVar(&f.addr, "addr", "127.0.0.1:8080", "listening address of the API and dashboard")
	fs.StringVar(&f.metricsAddr, "metrics-addr", "", "listening address of /metrics (Prometheus); empty: no metrics served")
	fs.StringVar(&f.trustedProxies, "trusted-proxies", "", "comma-separated addresses or CIDR ranges of reverse proxies whose X-Forwarded-For/-Proto are believed; empty: the socket's peer is the client")
	f.db.register(fs)
	f.log.register(fs)
	f.worker.register(fs, name == "worker")
	return fs
}

func cmdServe(ctx context.Context, e env) error  { return serveParts(ctx, e, "serve", true, true) }
func cmdAPI(ctx context.Context, e env) error    { return serveParts(ctx, e, "api", true, false) }
func cmdWorker(ctx context.Context, e env) error { return serveParts(ctx, e, "worker", false, true) }

func serveParts(ctx context.Context, e env, name string, withHTTP, withWorker bool) error {
	var f serveFlags
	fs := f.register(e, name)
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
	return runParts(ctx, e, st, f, log, withHTTP, withWorker, nil)
}

// runParts runs the HTTP server (API and dashboard) and/or the worker on
// an open store until ctx ends. ready, if set, is called with the
// listening address once the server accepts connections.
func runParts(ctx context.Context, e env, st *store, f serveFlags, log *slog.Logger, withHTTP, withWorker bool, ready func(addr string)) error {
	metrics := api.NewMetrics(st)
	wk, err := f.worker.build(e, st, log, func(job string, took time.Duration) {
		metrics.Evaluations.WithLabelValues(job).Observe(took.Seconds())
	})
	if err != nil {
		return err
	}
	if f.worker.once {
		return wk.RunOnce(ctx)
	}
	errc := make(chan error, 3)
	if st.roleWarning != "" {
		log.Warn(st.roleWarning)
	}
	var srv, msrv *http.Server
	if withHTTP {
		proxies, err := api.ParseTrustedProxies(f.trustedProxies)
		if err != nil {
			return exitUsage{fmt.Errorf("--trusted-proxies: %w", err)}
		}
		ln, err := net.Listen("tcp", f.addr)
		if err != nil {
			return fmt.Errorf("listen on %s: %w (is another halfmark running? choose another --addr)", f.addr, err)
		}
		h, err := newHandler(st.DB, wk, log, metrics, httpConfig{roleWarning: st.roleWarning, trustedProxies: proxies})
		if err != nil {
			return err
		}
		if f.metricsAddr != "" {
			mln, err := net.Listen("tcp", f.metricsAddr)
			if err != nil {
				ln.Close()
				return fmt.Errorf("listen on %s: %w (choose another --metrics-addr)", f.metricsAddr, err)
			}
			msrv = &http.Server{Handler: api.MetricsHandler(metrics), ReadHeaderTimeout: 10 * time.Second}
			fmt.Fprintf(e.stdout, "Metrics at http://%s/metrics\n", mln.Addr())
			go func() { errc <- msrv.Serve(mln) }()
		}
		srv = &http.Server{Handler: h, ReadHeaderTimeout: 10 * time.Second, ReadTimeout: 120 * time.Second}
		fmt.Fprintf(e.stdout, "Halfmark is listening on http://%s (dashboard at /, API under /api/v1)\n", ln.Addr())
		go func() { errc <- srv.Serve(ln) }()
		if ready != nil {
			ready(ln.Addr().String())
		}
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
	log.Info("started", "web", withHTTP, "worker", withWorker)
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
	if msrv != nil {
		_ = msrv.Close()
	}
	<-wdone // the schedule stops after its running jobs finish
	return nil
}

// httpConfig is the HTTP server's configuration beyond its services.
type httpConfig struct {
	roleWarning    string       // the database role is not bound by the append-only triggers
	trustedProxies []*net.IPNet // reverse proxies whose forwarding headers are believed
}

// newHandler is the whole HTTP surface: the JSON API and the dashboard on
// one echo server (routes in api/routes.go and web/routes.go). /metrics is
// served on its own address (api.MetricsHandler).
func newHandler(d *db.DB, wk *worker.Worker, log *slog.Logger, metrics *api.Metrics, cfg httpConfig) (http.Handler, error) {
	deps := web.Deps{Machines: d, Checks: d, Series: d, Users: d, Sessions: d, SignOffs: d,
		Raw: d, Status: d, Alerts: d, Events: d, Audit: d, Tolerances: liveBook{wk}, Log: log, Penumbra: d, Import: d, Export: d,
		Findings: d, Evaluations: d, Verdicts: d, Reports: d, TrustedProxies: cfg.trustedProxies,
		Instruction: instructionOf(wk.Tolerances())}
	h := api.New(api.Services{Machines: d, Checks: d, Series: d, Auth: d, Audit: d, Pinger: d, Log: log,
		Alerts: d, Status: d, Events: d, Findings: d, Evaluations: d, Raw: d, Metrics: metrics, Penumbra: d,
		Reports: d, ReportRenderer: web.NewReporter(deps),
		RoleWarning: cfg.roleWarning, TrustedProxies: cfg.trustedProxies})
	err := web.Register(h, deps)
	return h, err
}

// liveBook is the tolerance book in force now: a SIGHUP reload is seen by
// the dashboard at its next request.
type liveBook struct{ w *worker.Worker }

func (b liveBook) Limits(q halfmark.Quantity, kind halfmark.CheckKind, edge string, asym bool) (halfmark.Limits, bool) {
	return b.w.Tolerances().Limits(q, kind, edge, asym)
}
func (b liveBook) Hash() string           { return b.w.Tolerances().Hash() }
func (b liveBook) Source() string         { return b.w.Tolerances().Source() }
func (b liveBook) IsShippedExample() bool { return b.w.Tolerances().IsShippedExample() }

// instructionOf is the tolerance book's text for a Level 2 or 3 morning
// verdict ("" : the dashboard's default, marked as a local choice).
func instructionOf(b halfmark.ToleranceBook) string {
	if i, ok := b.(interface{ Instruction() string }); ok {
		return i.Instruction()
	}
	return ""
}
