package api_test

import (
	"context"
	"encoding/json"
	"fmt"
	"halfmark/db"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/google/uuid"

	"halfmark"
)

// BenchmarkIngest10kVsCopy stores 10,000 edge results (2,500 checks × X1, X2,
// Y1, Y2) through POST /api/v1/checks/batch — JSON decoding, validation,
// projection, series upsert, audit rows — and, in the same iteration, the
// same 10,000 rows with a raw COPY (db.CopyRows) into a flat table. It reports
// api_vs_copy = copy time / API time (1 = as fast as raw COPY; target ≥ 0.5).
func BenchmarkIngest10kVsCopy(b *testing.B) {
	e := newBenchEnv(b)
	ctx := context.Background()
	owner, err := db.Open(ctx, e.owner) // the baseline's table is the owner's
	if err != nil {
		b.Fatal(err)
	}
	defer owner.Close()
	if _, err := owner.Pool.Exec(ctx, `CREATE TABLE bench_raw (check_id uuid, machine_id bigint, beam_id bigint, kind text,
		measured_at timestamptz, ssd_cm float8, depth_cm float8, field_x_cm float8, field_y_cm float8, edge text,
		position_mm float8, penumbra_mm float8)`); err != nil {
		b.Fatal(err)
	}
	const nChecks = 2500
	edges := []string{"X1", "X2", "Y1", "Y2"}
	var apiTotal, copyTotal time.Duration
	base := time.Date(2020, 1, 1, 7, 0, 0, 0, time.UTC)
	b.ResetTimer()
	for it := 0; it < b.N; it++ {
		var sb strings.Builder
		rows := make([][]any, 0, nChecks*4)
		sb.WriteString(`{"checks":[`)
		for i := 0; i < nChecks; i++ {
			id := uuid.NewString()
			at := base.Add(time.Duration(it*nChecks+i) * time.Hour)
			if i > 0 {
				sb.WriteByte(',')
			}
			fmt.Fprintf(&sb, `{"id":%q,"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":%q,"setup":{"ssd_cm":100,"depth_cm":10,"field_x_cm":10,"field_y_cm":10},"edges":[`,
				id, e.mach, e.beam, at.Format(time.RFC3339))
			for j, ed := range edges {
				if j > 0 {
					sb.WriteByte(',')
				}
				pos, pen := 55.0+float64(i%7)*0.01, 3.1+float64(j)*0.05
				fmt.Fprintf(&sb, `{"edge":%q,"position_mm":%g,"penumbra_mm":%g}`, ed, pos, pen)
				rows = append(rows, []any{id, e.mach, e.beam, "morning", at, 100.0, 10.0, 10.0, 10.0, ed, pos, pen})
			}
			sb.WriteString("]}")
		}
		sb.WriteString("]}")
		body := sb.String()

		start := time.Now()
		req, _ := http.NewRequest("POST", e.srv.URL+"/api/v1/checks/batch", strings.NewReader(body))
		req.Header.Set("Content-Type", "application/json")
		req.Header.Set("Authorization", "Bearer "+e.tokens[halfmark.RoleTherapist])
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			b.Fatal(err)
		}
		var res halfmark.BatchResult
		_ = json.NewDecoder(resp.Body).Decode(&res)
		resp.Body.Close()
		if resp.StatusCode != 201 || res.Created != nChecks {
			b.Fatalf("batch: %d %+v", resp.StatusCode, res)
		}
		apiTotal += time.Since(start)

		start = time.Now()
		n, err := owner.CopyRows(ctx, "bench_raw", []string{"check_id", "machine_id", "beam_id", "kind",
			"measured_at", "ssd_cm", "depth_cm", "field_x_cm", "field_y_cm", "edge", "position_mm", "penumbra_mm"}, rows)
		if err != nil || n != int64(len(rows)) {
			b.Fatal(n, err)
		}
		copyTotal += time.Since(start)
	}
	b.ReportMetric(float64(apiTotal.Milliseconds())/float64(b.N), "api_ms/10k")
	b.ReportMetric(float64(copyTotal.Milliseconds())/float64(b.N), "copy_ms/10k")
	b.ReportMetric(copyTotal.Seconds()/apiTotal.Seconds(), "api_vs_copy")
}
