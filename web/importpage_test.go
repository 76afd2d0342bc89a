package web_test

import (
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"testing"
	"time"
)

const europeanUpload = "Gerät;Energie;Datum;X1 (mm);X2 (mm);Pen X1\n" +
	"Tern;6X;04.03.2024 07:41;-50,2;49,8;3,1\n" +
	"Tern;6X;05.03.2024 07:39;-50,0;50,0;3,2\n" +
	"Tern;6X;06.03.2024 07:40;-5,0;50,0;3,2\n" // line 4: X1 in cm where mm is expected

const europeanUploadMap = `layout = "wide"
timezone = "Europe/Berlin"
[columns]
machine = "Gerät"
beam = "Energie"
measured_at = "Datum"
X1 = "X1 (mm)"
X2 = "X2 (mm)"
penumbra.X1 = "Pen X1"
[constants]
kind = "morning"
field_x_cm = 10
[beams]
"6X" = "6 MV"
`

// Upload → mapping → preview (nothing stored, refused rows with line,
// column and reason) → store (physicist); storing again adds nothing.
func TestImportPageUploadPreviewStore(t *testing.T) {
	h := newHarness(t, harnessOpts{})
	c := h.signIn("physicist@example.org")
	_, body, _ := c.get("/import")
	tok := csrfField.FindStringSubmatch(body)[1]
	fields := map[string]string{"_csrf": tok, "mapping": europeanUploadMap, "create_missing": "1", "skip_bad": "1"}
	code, body := c.upload("/import/preview", fields, "log.csv", []byte(europeanUpload))
	must(t, code == http.StatusOK, "preview: %d %s", code, body)
	for _, s := range []string{"Would create: machine Tern (SAD 100 cm)", "Would create: beam Tern 6 MV",
		"<td>Tern</td><td>6 MV</td><td>morning</td><td class=\"num\">2</td><td class=\"num\">4</td>",
		"<td class=\"num\">4</td><td>X1 (mm)</td><td>-5 mm looks like cm", "Store 2 checks", "text, separator semicolon, decimal comma"} {
		must(t, strings.Contains(body, s), "preview lacks %q:\n%s", s, body)
	}
	ms, err := h.db.Machines(h.ctx)
	must(t, err == nil && len(ms) == 0 && len(h.checks("")) == 0, "the preview stored something")
	form := url.Values{}
	for _, m := range hidden.FindAllStringSubmatch(body[strings.Index(body, `action="/import/store"`):], -1) {
		form.Set(m[1], m[2])
	}
	code, body, _ = c.post("/import/store", form)
	must(t, code == http.StatusOK && strings.Contains(body, "Stored 2 new checks; 0 were already stored; 1 refused rows skipped."), "store: %d %s", code, body)
	first := 0
	for _, ch := range h.checks("") {
		if !ch.MeasuredAt.Equal(time.Date(2024, 3, 4, 6, 41, 0, 0, time.UTC)) {
			continue
		}
		for _, e := range ch.Edges {
			if e.Edge == "X1" && e.PositionMM == -50.2 && e.PenumbraMM != nil && *e.PenumbraMM == 3.1 {
				first++
			}
		}
	}
	must(t, first == 1, "the first row is not stored as written")
	code, body, _ = c.post("/import/store", form)
	must(t, code == http.StatusOK && strings.Contains(body, "Stored 0 new checks; 2 were already stored"), "store again: %d %s", code, body)
	must(t, len(h.checks("")) == 2, "storing again doubled checks")

	// A bad mapping is refused with what to fix; a therapist cannot import.
	code, body = c.upload("/import/preview", map[string]string{"_csrf": tok, "mapping": "layout = \"tall\""}, "log.csv", []byte(europeanUpload))
	must(t, code == http.StatusUnprocessableEntity && strings.Contains(body, `layout = "tall": use "long"`), "bad mapping: %d", code)
	th := h.signIn("therapist@example.org")
	_, tbody, _ := th.get("/import")
	code, _ = th.upload("/import/preview", map[string]string{"_csrf": csrfField.FindStringSubmatch(tbody)[1]}, "log.csv", []byte(europeanUpload))
	must(t, code == http.StatusForbidden, "therapist import: %d", code)

	// The download is the long layout the importer reads.
	code, csv, hdr := th.get("/export?format=csv")
	must(t, code == http.StatusOK && strings.HasPrefix(csv, "id,machine,beam,kind,measured_at,") && strings.Count(csv, "\n") == 5,
		"export: %d %q %s", code, hdr.Get("Content-Type"), csv)
	must(t, strings.Contains(csv, ",Tern,6 MV,morning,2024-03-04T06:41:00Z,") && strings.Contains(hdr.Get("Content-Disposition"), "attachment"), "export rows:\n%s", csv)
	code, _, _ = th.get(fmt.Sprintf("/export?format=pdf&machine=%s", "x"))
	must(t, code == http.StatusBadRequest, "bad export query: %d", code)
}
