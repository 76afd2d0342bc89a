package main

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"net/http"
	"os"
	"os/exec"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/emersion/go-smtp"

	"halfmark"
)

// mailbox is an in-process SMTP server that keeps every message.
type mailbox struct {
	mu   sync.Mutex
	msgs []string
}

func (m *mailbox) NewSession(*smtp.Conn) (smtp.Session, error) { return &mailSession{box: m}, nil }

type mailSession struct{ box *mailbox }

func (s *mailSession) Mail(string, *smtp.MailOptions) error { return nil }
func (s *mailSession) Rcpt(string, *smtp.RcptOptions) error { return nil }
func (s *mailSession) Data(r io.Reader) error {
	b, err := io.ReadAll(r)
	if err != nil {
		return err
	}
	s.box.mu.Lock()
	s.box.msgs = append(s.box.msgs, string(b))
	s.box.mu.Unlock()
	return nil
}
func (s *mailSession) Reset()        {}
func (s *mailSession) Logout() error { return nil }

func (m *mailbox) count(substr string) int {
	m.mu.Lock()
	defer m.mu.Unlock()
	n := 0
	for _, msg := range m.msgs {
		if strings.Contains(msg, substr) {
			n++
		}
	}
	return n
}

// startProc runs the binary with args and env until the test ends.
func startProc(t testing.TB, bin string, env []string, args ...string) *exec.Cmd {
	return startProcOut(t, bin, env, nil, args...)
}

// startListening runs a server process on 127.0.0.1:0 and returns the
// address it bound (from its "listening on" line) once it answers /readyz.
func startListening(t testing.TB, bin string, env []string, args ...string) string {
	t.Helper()
	addrc := make(chan string, 1)
	startProcOut(t, bin, env, func(line string) {
		if m := listeningRE.FindStringSubmatch(line); m != nil {
			select {
			case addrc <- m[1]:
			default:
			}
		}
	}, append(args, "--addr", "127.0.0.1:0")...)
	select {
	case addr := <-addrc:
		waitReady(t, addr)
		return addr
	case <-time.After(60 * time.Second):
		t.Fatalf("%s printed no listening address within 60 s", args[0])
		return ""
	}
}

// startProcOut is startProc with a callback for each line of standard output.
func startProcOut(t testing.TB, bin string, env []string, onStdout func(string), args ...string) *exec.Cmd {
	t.Helper()
	cmd := exec.Command(bin, args...)
	cmd.Env = append(os.Environ(), env...)
	out, _ := cmd.StderrPipe()
	stdout, _ := cmd.StdoutPipe()
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	drain := func(r io.Reader, line func(string)) { // keep the pipes drained; show the logs with -v
		sc := bufio.NewScanner(r)
		for sc.Scan() {
			if line != nil {
				line(sc.Text())
			}
			if testing.Verbose() {
				t.Logf("%s: %s", args[0], sc.Text())
			}
		}
	}
	go drain(out, nil)
	go drain(stdout, onStdout)
	t.Cleanup(func() {
		_ = cmd.Process.Signal(os.Interrupt)
		done := make(chan struct{})
		go func() { _ = cmd.Wait(); close(done) }()
		select {
		case <-done:
		case <-time.After(20 * time.Second):
			_ = cmd.Process.Kill()
		}
	})
	return cmd
}

func waitReady(t testing.TB, addr string) {
	t.Helper()
	for i := 0; i < 300; i++ {
		resp, err := http.Get("http://" + addr + "/readyz")
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == 200 {
				return
			}
		}
		time.Sleep(100 * time.Millisecond)
	}
	t.Fatalf("%s never became ready", addr)
}

// Two `api` processes and two `worker` processes against one PostgreSQL:
// checks posted to both APIs are stored once each; every scheduled slot is
// run by one worker only; a 3.5 mm step on X1 opens one Level 3 alert and
// sends one e-mail, however many workers see it.
func TestScaleOutTwoAPIsTwoWorkers(t *testing.T) {
	if testing.Short() {
		t.Skip("scale-out test skipped in -short mode")
	}
	ctx := context.Background()
	url, d := migratedStore(t)
	box, smtpPort := startMailbox(t)

	bin := buildBinary(t)
	env := []string{"HALFMARK_DATABASE_URL=" + url, "HALFMARK_SMTP_HOST=127.0.0.1", "HALFMARK_SMTP_PORT=" + smtpPort,
		"HALFMARK_SMTP_TLS=none", "HALFMARK_SMTP_FROM=halfmark@kestrel-bay.example",
		"HALFMARK_NOTIFY_LEVEL2=chief@kestrel-bay.example", "HALFMARK_NOTIFY_LEVEL3=chief@kestrel-bay.example"}
	addrs := []string{startListening(t, bin, env, "api"), startListening(t, bin, env, "api")}
	for i := 0; i < 2; i++ {
		startProc(t, bin, env, "worker", "--evaluate-every", "2s", "--deliver-every", "2s")
	}
	a := halfmark.CLIActor("scale-out")
	_, tok, err := d.CreateToken(ctx, a, "scale-out", halfmark.RoleAdmin)
	if err != nil {
		t.Fatal(err)
	}
	m := halfmark.Machine{Name: "Linac Aster", SADcm: 100}
	if err := d.CreateMachine(ctx, a, &m); err != nil {
		t.Fatal(err)
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: 6}
	if err := d.CreateBeam(ctx, a, &b); err != nil {
		t.Fatal(err)
	}
	post := func(i int, x1 float64) {
		body := fmt.Sprintf(`{"machine_id":%d,"beam_id":%d,"kind":"morning","measured_at":%q,"edges":[{"edge":"X1","position_mm":%g},{"edge":"X2","position_mm":50}]}`,
			m.ID, b.ID, time.Now().Add(time.Duration(i-40)*time.Hour).UTC().Format(time.RFC3339), x1)
		req, _ := http.NewRequest("POST", "http://"+addrs[i%2]+"/api/v1/checks", strings.NewReader(body))
		req.Header.Set("Content-Type", "application/json")
		req.Header.Set("Authorization", "Bearer "+tok)
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode != 201 {
			t.Fatalf("check %d through %s: %d", i, addrs[i%2], resp.StatusCode)
		}
	}
	for i := 0; i < 30; i++ {
		post(i, 50+0.1*float64(i%3-1))
	}
	ssr, err := d.MachineSeries(ctx, m.ID)
	if err != nil {
		t.Fatal(err)
	}
	var x1 int64
	for _, s := range ssr {
		if s.Edge == "X1" && s.Quantity == halfmark.QPosition {
			x1 = s.ID
		}
	}
	v, sd := 50.0, 0.1
	if err := d.SetBaseline(ctx, a, &halfmark.Baseline{SeriesID: x1, ValueMM: &v, SigmaMM: &sd, ValidFrom: time.Now().AddDate(0, 0, -30), Reason: "commissioning"}); err != nil {
		t.Fatal(err)
	}
	post(31, 53.5) // 3.5 mm beyond the 3 mm action limit of the shipped book: Level 3
	deadline := time.Now().Add(60 * time.Second)
	for box.count("Level 3") == 0 && time.Now().Before(deadline) {
		time.Sleep(200 * time.Millisecond)
	}
	time.Sleep(5 * time.Second) // let both workers run a few more slots
	if n := box.count("Level 3"); n != 1 {
		t.Fatalf("%d Level 3 e-mails, want exactly 1", n)
	}
	var alerts, l3 int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*), count(*) FILTER (WHERE level = 3) FROM alerts WHERE series_id = $1`, x1).Scan(&alerts, &l3)
	if l3 != 1 {
		t.Fatalf("%d alerts on X1 (%d at Level 3), want one Level 3 alert", alerts, l3)
	}
	// One fault, one finding, however many workers judged it.
	fs, err := d.Findings(ctx, halfmark.FindingFilter{State: "all"})
	if err != nil || len(fs) != 1 || fs[0].Name != "X1" || fs[0].Level != halfmark.LevelImmediate {
		t.Fatalf("findings %+v (%v); want exactly one, jaw X1 at Level 3", fs, err)
	}
	var checks int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*) FROM checks`).Scan(&checks)
	if checks != 31 {
		t.Fatalf("%d checks stored, want 31", checks)
	}
	// One run per slot, and both workers took part: scale-out means both
	// run slots, not one running while the other idles. Slots come every
	// 2 s per job; give the second worker up to 30 s to win one.
	var slots, runs, workers int
	for deadline := time.Now().Add(30 * time.Second); ; time.Sleep(time.Second) {
		_ = d.Pool.QueryRow(ctx, `SELECT count(DISTINCT (job, slot)), count(*), count(DISTINCT worker) FROM job_runs`).Scan(&slots, &runs, &workers)
		if workers >= 2 || time.Now().After(deadline) {
			break
		}
	}
	if slots != runs || runs == 0 {
		t.Fatalf("%d job runs for %d slots", runs, slots)
	}
	if workers != 2 {
		t.Fatalf("slots were run by %d worker(s), want both", workers)
	}
	var evals, evalSlots int
	_ = d.Pool.QueryRow(ctx, `SELECT count(*), count(DISTINCT at) FROM evaluations WHERE series_id = $1`, x1).Scan(&evals, &evalSlots)
	if evals != evalSlots {
		t.Fatalf("X1 evaluated %d times in %d distinct runs: a run was doubled", evals, evalSlots)
	}
	t.Logf("%d slots run once each by %d worker(s); X1 evaluated %d times; 1 finding, 1 e-mail", slots, workers, evals)
}
