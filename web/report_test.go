package web_test

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"net/http"
	"net/url"
	"os"
	"os/exec"
	"regexp"
	"strings"
	"testing"
	"time"

	"halfmark"
)

var shaOnPage = regexp.MustCompile(`SHA-256 of the signed PDF: <code>([0-9a-f]{64})</code>`)

// The dashboard's report page: a draft to download, signing that asks for
// a reason while a required check is missing (here every month's monthly
// check), and afterwards the signer, the time and the SHA-256 of the
// signed bytes — the download's SHA-256 (Go's crypto/sha256) is the one
// shown.
func TestReportPage(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	mid, bids := h.machine("Linac Report", 6)
	h.history(mid, bids[0], 10, func(int) float64 { return 0 })
	month := time.Now().Format("2006-01")
	page := fmt.Sprintf("/machines/%d/reports/%s", mid, month)
	th := h.signIn("therapist@example.org")
	code, body, _ := th.get(page)
	must(t, code == http.StatusOK && strings.Contains(body, "the monthly check is missing") && !strings.Contains(body, `id="sign"`), "therapist page: %d", code)
	code, pdf, hdr := th.get(page + "/draft.pdf")
	must(t, code == http.StatusOK && hdr.Get("Content-Type") == "application/pdf" && strings.HasPrefix(pdf, "%PDF-"), "draft: %d", code)
	code, _, _ = th.get(page + "/signed.pdf")
	must(t, code == http.StatusNotFound, "signed before signing: %d", code)
	code, _, _ = th.get(fmt.Sprintf("/machines/%d/reports/2026-13", mid))
	must(t, code == http.StatusUnprocessableEntity, "bad month: %d", code)

	ph := h.signIn("physicist@example.org")
	code, body, _ = ph.postWithToken(page, page+"/sign", url.Values{"reason": {""}})
	must(t, code == http.StatusUnprocessableEntity && strings.Contains(body, `id="sign-problem"`) && strings.Contains(body, "reason"), "sign without a reason: %d", code)
	_, err := h.db.SignedReport(h.ctx, mid, month)
	must(t, halfmark.ErrorCodeOf(err) == halfmark.ENotFound, "signed without a reason (%v)", err)
	code, _, hdr = ph.postWithToken(page, page+"/sign", url.Values{"reason": {"monthly check moved to next week by the chief physicist"}})
	must(t, code == http.StatusSeeOther && hdr.Get("Location") == page, "sign: %d", code)
	_, body, _ = th.get(page)
	m := shaOnPage.FindStringSubmatch(body)
	must(t, m != nil && strings.Contains(body, "Signed by <strong>physicist@example.org</strong>"), "signed page lacks the signer or SHA-256")
	code, pdf, hdr = th.get(page + "/signed.pdf")
	sum := sha256.Sum256([]byte(pdf))
	must(t, code == http.StatusOK && hex.EncodeToString(sum[:]) == m[1] && hdr.Get("X-Report-Signed-By") == "physicist@example.org", "signed download: %d", code)
	code, body, _ = ph.postWithToken(page, page+"/sign", url.Values{"reason": {"again"}})
	must(t, code == http.StatusConflict && strings.Contains(body, "already signed"), "second signature: %d", code)
}

// The report reads the engine: with the store's own findings and
// evaluations, a jaw X2 stepped 2.5 mm outward this month is named on
// page 1 with its level, and every page says machine, month and
// "page n of N" (read back with pdftotext, poppler-utils).
func TestReportFromEngine(t *testing.T) {
	if _, err := exec.LookPath("pdftotext"); err != nil {
		if os.Getenv("CI") == "" {
			t.Skip("pdftotext is not installed (apt-get install poppler-utils); in CI it runs")
		}
		t.Fatal("CI is set but pdftotext is missing: install poppler-utils")
	}
	h := newHarness(t, harnessOpts{engine: true})
	mid, bids := h.machine("Linac Drift", 6)
	h.history(mid, bids[0], 30, func(i int) float64 {
		if i >= 20 {
			return 2.5
		}
		return 0
	})
	h.evaluate()
	month := time.Now().Add(-24 * time.Hour).Format("2006-01")
	th := h.signIn("therapist@example.org")
	code, pdf, _ := th.get(fmt.Sprintf("/machines/%d/reports/%s/draft.pdf", mid, month))
	must(t, code == http.StatusOK, "draft: %d", code)
	cmd := exec.Command("pdftotext", "-", "-")
	cmd.Stdin = strings.NewReader(pdf)
	out, err := cmd.Output()
	must(t, err == nil, "pdftotext: %v", err)
	pages := strings.Split(strings.TrimRight(string(out), "\f"), "\f")
	for i, p := range pages {
		must(t, strings.Contains(p, fmt.Sprintf("page %d of %d", i+1, len(pages))) && strings.Contains(p, "Linac Drift") && strings.Contains(p, month),
			"page %d lacks machine, month or page n of N", i+1)
	}
	first := strings.Join(strings.Fields(pages[0]), " ")
	must(t, strings.Contains(first, "jaw X2") && strings.Contains(first, "Level"), "page 1 does not name the X2 finding:\n%s", first)
	must(t, strings.Contains(first, "jaw X1") && (strings.Contains(first, "in control") || strings.Contains(first, "within tolerance")), "page 1 lacks the steady jaw's verdict:\n%s", first)
}
