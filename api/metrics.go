package api

import (
	"context"
	"net/http"
	"strconv"
	"time"

	"github.com/labstack/echo/v4"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"
)

// Gauges reads the current state the metrics report at each scrape.
type Gauges interface {
	// OpenAlertsByLevel counts unresolved alerts by TG-142 level (1–3).
	OpenAlertsByLevel(ctx context.Context) (map[int]int, error)
	// OutboxBacklog counts notifications not yet delivered.
	OutboxBacklog(ctx context.Context) (int, error)
}

// Metrics are Halfmark's Prometheus metrics, served at /metrics.
type Metrics struct {
	Registry    *prometheus.Registry
	requests    *prometheus.CounterVec
	duration    *prometheus.HistogramVec
	Checks      prometheus.Counter
	Edges       prometheus.Counter
	Evaluations *prometheus.HistogramVec // by run kind: incremental, full
}

// NewMetrics registers the metrics; g (may be nil) supplies the gauges.
func NewMetrics(g Gauges) *Metrics {
	r := prometheus.NewRegistry()
	m := &Metrics{
		Registry: r,
		requests: prometheus.NewCounterVec(prometheus.CounterOpts{Name: "halfmark_http_requests_total",
			Help: "HTTP requests by method, route and status."}, []string{"method", "route", "status"}),
		duration: prometheus.NewHistogramVec(prometheus.HistogramOpts{Name: "halfmark_http_request_duration_seconds",
			Help: "HTTP request duration by route.", Buckets: prometheus.ExponentialBuckets(0.001, 2.5, 12)}, []string{"route"}),
		Checks: prometheus.NewCounter(prometheus.CounterOpts{Name: "halfmark_ingested_checks_total",
			Help: "Checks newly stored through the API."}),
		Edges: prometheus.NewCounter(prometheus.CounterOpts{Name: "halfmark_ingested_edge_results_total",
			Help: "Edge results newly stored through the API."}),
		Evaluations: prometheus.NewHistogramVec(prometheus.HistogramOpts{Name: "halfmark_evaluation_duration_seconds",
			Help: "Duration of drift-engine evaluation runs.", Buckets: prometheus.ExponentialBuckets(0.01, 2.5, 12)}, []string{"run"}),
	}
	r.MustRegister(m.requests, m.duration, m.Checks, m.Edges, m.Evaluations,
		collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	if g != nil {
		r.MustRegister(&stateCollector{g: g})
	}
	return m
}

var (
	alertsDesc = prometheus.NewDesc("halfmark_open_alerts", "Unresolved alerts by TG-142 level.", []string{"level"}, nil)
	outboxDesc = prometheus.NewDesc("halfmark_outbox_backlog", "Notifications queued and not yet delivered.", nil, nil)
)

// stateCollector asks the store at scrape time.
type stateCollector struct{ g Gauges }

func (s *stateCollector) Describe(ch chan<- *prometheus.Desc) { ch <- alertsDesc; ch <- outboxDesc }

func (s *stateCollector) Collect(ch chan<- prometheus.Metric) {
	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Second)
	defer cancel()
	if byLevel, err := s.g.OpenAlertsByLevel(ctx); err == nil {
		for l := 1; l <= 3; l++ {
			ch <- prometheus.MustNewConstMetric(alertsDesc, prometheus.GaugeValue, float64(byLevel[l]), strconv.Itoa(l))
		}
	}
	if n, err := s.g.OutboxBacklog(ctx); err == nil {
		ch <- prometheus.MustNewConstMetric(outboxDesc, prometheus.GaugeValue, float64(n))
	}
}

// middleware counts every request by its route template (not its path, so
// ids do not explode the label set).
func (m *Metrics) middleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		start := time.Now()
		err := next(c)
		status := c.Response().Status
		if err != nil {
			status = problemFor(err).Status
		}
		route := c.Path()
		if route == "" {
			route = "unmatched"
		}
		m.requests.WithLabelValues(c.Request().Method, route, strconv.Itoa(status)).Inc()
		m.duration.WithLabelValues(route).Observe(time.Since(start).Seconds())
		return err
	}
}

func (m *Metrics) handler() http.Handler {
	return promhttp.HandlerFor(m.Registry, promhttp.HandlerOpts{})
}
