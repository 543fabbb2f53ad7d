package sqlstore

import (
	"errors"
	"strings"
	"testing"
	"testing/fstest"

	"github.com/voltcast/voltcast/service/store"
)

func TestQuestionNumbered(t *testing.T) {
	for in, want := range map[string]string{
		"SELECT 1":                      "SELECT 1",
		"a = $1 AND b = $12":            "a = ?1 AND b = ?12",
		"($1, $2, $3)":                  "(?1, ?2, ?3)",
		"x = $a":                        "x = $a",
		"trailing $":                    "trailing $",
		"$1":                            "?1",
		"nextval('store_versions'), $9": "nextval('store_versions'), ?9",
	} {
		if got := QuestionNumbered(in); got != want {
			t.Errorf("QuestionNumbered(%q) = %q; want %q", in, got, want)
		}
	}
}

func TestToken(t *testing.T) {
	s := &Store{tokenKey: []byte(strings.Repeat("k", tokenKeyBytes))}
	c := cursor{List: "batteries", Tenant: "default", Filter: "f", After: "bike-9", AfterTime: 42}
	tok := s.encodeToken(c)
	got, err := s.decodeToken(tok, "batteries", "default", "f")
	if err != nil || got != c {
		t.Fatalf("decodeToken(encodeToken(%+v)) = %+v, %v", c, got, err)
	}
	if got, err := s.decodeToken("", "batteries", "default", "f"); err != nil || got != (cursor{}) {
		t.Errorf("decodeToken(\"\") = %+v, %v; want zero cursor", got, err)
	}
	other := &Store{tokenKey: []byte(strings.Repeat("j", tokenKeyBytes))}
	for name, try := range map[string]func() error{
		"other key":    func() error { _, err := other.decodeToken(tok, "batteries", "default", "f"); return err },
		"other list":   func() error { _, err := s.decodeToken(tok, "calibrations", "default", "f"); return err },
		"other tenant": func() error { _, err := s.decodeToken(tok, "batteries", "t2", "f"); return err },
		"other filter": func() error { _, err := s.decodeToken(tok, "batteries", "default", ""); return err },
		"padding":      func() error { _, err := s.decodeToken(tok+"=", "batteries", "default", "f"); return err },
		"not base64":   func() error { _, err := s.decodeToken("!!!!", "batteries", "default", "f"); return err },
	} {
		if err := try(); !errors.Is(err, store.ErrInvalidPageToken) {
			t.Errorf("decodeToken(%s) = %v; want ErrInvalidPageToken", name, err)
		}
	}
}

func TestFilterKey(t *testing.T) {
	a := filterKey(store.BatteryFilter{Labels: map[string]string{"a": "1", "b": "2"}})
	b := filterKey(store.BatteryFilter{Labels: map[string]string{"b": "2", "a": "1"}})
	c := filterKey(store.BatteryFilter{Labels: map[string]string{"a": "1b", "": "2"}})
	d := filterKey(store.BatteryFilter{TypeName: "a", Labels: map[string]string{"b": "2"}})
	if a != b || a == c || a == d || filterKey(store.BatteryFilter{}) != "" {
		t.Errorf("filterKey: %q %q %q %q; want the first two equal, the others different, empty filter \"\"", a, b, c, d)
	}
}

func TestLoadMigrations(t *testing.T) {
	file := func(s string) *fstest.MapFile { return &fstest.MapFile{Data: []byte(s)} }
	good := fstest.MapFS{
		"0001_a.up.sql": file("CREATE"), "0001_a.down.sql": file("DROP"),
		"0002_b.up.sql": file("CREATE"), "0002_b.down.sql": file("DROP"),
	}
	ms, err := LoadMigrations(good)
	if err != nil || len(ms) != 2 || ms[1].Name != "b" || ms[1].Version != 2 {
		t.Errorf("LoadMigrations(good) = %+v, %v", ms, err)
	}
	for name, fsys := range map[string]fstest.MapFS{
		"gap":         {"0001_a.up.sql": file("x"), "0001_a.down.sql": file("x"), "0003_c.up.sql": file("x"), "0003_c.down.sql": file("x")},
		"no down":     {"0001_a.up.sql": file("x")},
		"stray file":  {"0001_a.up.sql": file("x"), "0001_a.down.sql": file("x"), "README": file("x")},
		"two names":   {"0001_a.up.sql": file("x"), "0001_b.down.sql": file("x")},
		"empty up":    {"0001_a.up.sql": file(""), "0001_a.down.sql": file("x")},
		"starts at 2": {"0002_a.up.sql": file("x"), "0002_a.down.sql": file("x")},
	} {
		if _, err := LoadMigrations(fsys); err == nil {
			t.Errorf("LoadMigrations(%s): no error", name)
		}
	}
}
