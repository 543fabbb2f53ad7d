package storetest

import (
	"fmt"
	"maps"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/service/store"
)

// listAll pages through ListBatteries with the given page size and returns the ids
// and the number of pages.
func listAll(t *testing.T, s store.Store, tenant string, f store.BatteryFilter, size int) ([]string, int) {
	t.Helper()
	var (
		ids   []string
		token string
		pages int
	)
	for {
		page, next, err := s.ListBatteries(t.Context(), tenant, f, store.PageRequest{Size: size, Token: token})
		check(t, fmt.Sprintf("ListBatteries(page %d)", pages+1), err)
		pages++
		if len(page) > size && size > 0 {
			t.Fatalf("ListBatteries: page of %d; asked for %d", len(page), size)
		}
		for _, b := range page {
			ids = append(ids, b.ID)
		}
		if next == "" {
			return ids, pages
		}
		if len(page) == 0 {
			t.Fatalf("ListBatteries: empty page with a next token")
		}
		if pages > 1000 {
			t.Fatalf("ListBatteries: no end after 1000 pages")
		}
		token = next
	}
}

// PaginationTest checks AIP-158 pagination: every item exactly once, in id order,
// across pages; the page size rules; and stable keyset paging while items are added.
func PaginationTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()

	var want []string
	for i := range 23 {
		want = append(want, fmt.Sprintf("bike-%02d", i))
	}
	shuffled := slices.Clone(want)
	rand.New(rand.NewPCG(1, 2)).Shuffle(len(shuffled), func(i, j int) { shuffled[i], shuffled[j] = shuffled[j], shuffled[i] })
	for _, id := range shuffled {
		check(t, "CreateBattery "+id, ignore(s.CreateBattery(ctx, tenantA, newBattery(id, builtinType), "")))
	}

	for _, tc := range []struct{ size, pages int }{{5, 5}, {1, 23}, {23, 1}, {22, 2}, {0, 1}, {store.MaxPageSize * 5, 1}} {
		got, pages := listAll(t, s, tenantA, store.BatteryFilter{}, tc.size)
		if !slices.Equal(got, want) || pages != tc.pages {
			t.Errorf("page size %d: %d pages of %v; want %d pages of %v", tc.size, pages, got, tc.pages, want)
		}
	}
	_, _, err := s.ListBatteries(ctx, tenantA, store.BatteryFilter{}, store.PageRequest{Size: -1})
	wantErr(t, "ListBatteries(size -1)", err, store.ErrInvalidArgument)

	// Keyset paging: an item added behind the cursor is not seen, one ahead is, and
	// nothing repeats.
	page, next, err := s.ListBatteries(ctx, tenantA, store.BatteryFilter{}, store.PageRequest{Size: 10})
	check(t, "ListBatteries(first 10)", err)
	check(t, "CreateBattery(behind)", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-05a", builtinType), "")))
	check(t, "CreateBattery(ahead)", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-15a", builtinType), "")))
	check(t, "DeleteBattery(ahead)", s.DeleteBattery(ctx, tenantA, "bike-20", store.AnyVersion))
	seen := map[string]int{}
	for _, b := range page {
		seen[b.ID]++
	}
	for next != "" {
		page, next, err = s.ListBatteries(ctx, tenantA, store.BatteryFilter{}, store.PageRequest{Size: 4, Token: next})
		check(t, "ListBatteries(rest)", err)
		for _, b := range page {
			seen[b.ID]++
		}
	}
	for id, n := range seen {
		if n != 1 {
			t.Errorf("keyset paging returned %s %d times", id, n)
		}
	}
	if seen["bike-05a"] != 0 || seen["bike-15a"] != 1 || seen["bike-20"] != 0 || len(seen) != 23 {
		t.Errorf("keyset paging saw %v; want the 23 ids less bike-20 plus bike-15a", slices.Sorted(maps.Keys(seen)))
	}

	// Types page by name too.
	for i := range 7 {
		check(t, "CreateBatteryType", ignore(s.CreateBatteryType(ctx, tenantA, newType(fmt.Sprintf("cell-%d", 6-i)), "")))
	}
	var names []string
	token := ""
	for {
		types, nextT, err := s.ListBatteryTypes(ctx, tenantA, store.PageRequest{Size: 3, Token: token})
		check(t, "ListBatteryTypes", err)
		for _, ty := range types {
			names = append(names, ty.Name)
		}
		if nextT == "" {
			break
		}
		token = nextT
	}
	if want := []string{"cell-0", "cell-1", "cell-2", "cell-3", "cell-4", "cell-5", "cell-6"}; !slices.Equal(names, want) {
		t.Errorf("ListBatteryTypes pages = %v; want %v", names, want)
	}
}

// PageTokensTest checks that page tokens are opaque and authenticated: altered,
// forged, or misapplied tokens (another list, tenant, filter or store) fail with
// [store.ErrInvalidPageToken].
func PageTokensTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	for i := range 4 {
		id := fmt.Sprintf("bike-%d", i)
		check(t, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery(id, builtinType), "")))
		check(t, "CreateBattery(B)", ignore(s.CreateBattery(ctx, tenantB, newBattery(id, builtinType), "")))
		check(t, "CreateBatteryType", ignore(s.CreateBatteryType(ctx, tenantA, newType(fmt.Sprintf("cell-%d", i)), "")))
		check(t, "CreateCalibration", ignore(s.CreateCalibration(ctx, tenantA,
			store.Calibration{ID: fmt.Sprintf("fit-%d", i), Status: store.CalibrationRunning}, "")))
	}
	_, token, err := s.ListBatteries(ctx, tenantA, store.BatteryFilter{}, store.PageRequest{Size: 2})
	check(t, "ListBatteries", err)
	if token == "" {
		t.Fatal("ListBatteries(size 2 of 4): no next token")
	}
	if strings.Contains(token, "bike-1") {
		t.Errorf("page token %q shows the cursor in clear text; want it opaque", token)
	}

	list := func(tenant string, f store.BatteryFilter, tok string) error {
		_, _, err := s.ListBatteries(ctx, tenant, f, store.PageRequest{Size: 2, Token: tok})
		return err
	}
	// Tokens survive a change of page size (AIP-158 allows it).
	if _, _, err := s.ListBatteries(ctx, tenantA, store.BatteryFilter{}, store.PageRequest{Size: 3, Token: token}); err != nil {
		t.Errorf("ListBatteries(token, other page size): %v", err)
	}
	bad := map[string]string{
		"garbage":       "not-a-token",
		"empty payload": "AAAA",
		"truncated":     token[:len(token)-3],
		"extended":      token + "AA",
		"too long":      strings.Repeat("A", 5000),
	}
	for i := range len(token) {
		c := byte('A')
		if token[i] == 'A' {
			c = 'B'
		}
		bad[fmt.Sprintf("byte %d altered", i)] = token[:i] + string(c) + token[i+1:]
	}
	for name, tok := range bad {
		wantErr(t, "ListBatteries(token "+name+")", list(tenantA, store.BatteryFilter{}, tok), store.ErrInvalidPageToken)
	}
	wantErr(t, "ListBatteries(token of tenant A in tenant B)", list(tenantB, store.BatteryFilter{}, token), store.ErrInvalidPageToken)
	wantErr(t, "ListBatteries(token with another filter)",
		list(tenantA, store.BatteryFilter{Labels: map[string]string{"fleet": "cargo"}}, token), store.ErrInvalidPageToken)
	_, _, err = s.ListBatteryTypes(ctx, tenantA, store.PageRequest{Size: 2, Token: token})
	wantErr(t, "ListBatteryTypes(token of batteries)", err, store.ErrInvalidPageToken)
	_, _, err = s.ListCalibrations(ctx, tenantA, store.PageRequest{Size: 2, Token: token})
	wantErr(t, "ListCalibrations(token of batteries)", err, store.ErrInvalidPageToken)

	// Another store (another database, another key) rejects this store's tokens.
	other := open(t)
	check(t, "CreateBattery(other store)", ignore(other.CreateBattery(ctx, tenantA, newBattery("bike-9", builtinType), "")))
	_, _, err = other.ListBatteries(ctx, tenantA, store.BatteryFilter{}, store.PageRequest{Size: 2, Token: token})
	wantErr(t, "ListBatteries(token of another store)", err, store.ErrInvalidPageToken)
}

// LabelsTest checks that labels round-trip and filter lists (every pair must match),
// that updates replace them, and that the type filter works alongside.
func LabelsTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	fleet := []struct {
		id, typ string
		labels  map[string]string
	}{
		{"bike-1", builtinType, map[string]string{"fleet": "cargo", "site": "north"}},
		{"bike-2", builtinType, map[string]string{"fleet": "cargo", "site": "south"}},
		{"bike-3", "generic-lfp-26650", map[string]string{"fleet": "cargo", "site": "south", "note": "Ünïcødé ok"}},
		{"ups-1", "generic-lfp-26650", map[string]string{"fleet": "shop"}},
		{"spare", builtinType, nil},
	}
	for _, f := range fleet {
		b := newBattery(f.id, f.typ)
		b.Labels = f.labels
		check(t, "CreateBattery "+f.id, ignore(s.CreateBattery(ctx, tenantA, b, "")))
	}
	got, err := s.GetBattery(ctx, tenantA, "bike-3")
	check(t, "GetBattery", err)
	if got.Labels["note"] != "Ünïcødé ok" || len(got.Labels) != 3 {
		t.Errorf("GetBattery labels = %v; want %v", got.Labels, fleet[2].labels)
	}

	for _, tc := range []struct {
		name string
		f    store.BatteryFilter
		want []string
	}{
		{"none", store.BatteryFilter{}, []string{"bike-1", "bike-2", "bike-3", "spare", "ups-1"}},
		{"fleet", store.BatteryFilter{Labels: map[string]string{"fleet": "cargo"}}, []string{"bike-1", "bike-2", "bike-3"}},
		{"fleet+site", store.BatteryFilter{Labels: map[string]string{"fleet": "cargo", "site": "south"}}, []string{"bike-2", "bike-3"}},
		{"no match", store.BatteryFilter{Labels: map[string]string{"fleet": "drones"}}, nil},
		{"key only elsewhere", store.BatteryFilter{Labels: map[string]string{"site": "shop"}}, nil},
		{"type", store.BatteryFilter{TypeName: "generic-lfp-26650"}, []string{"bike-3", "ups-1"}},
		{"type+label", store.BatteryFilter{TypeName: "generic-lfp-26650", Labels: map[string]string{"fleet": "cargo"}}, []string{"bike-3"}},
	} {
		for _, size := range []int{1, 2, 0} {
			ids, _ := listAll(t, s, tenantA, tc.f, size)
			if !slices.Equal(ids, tc.want) {
				t.Errorf("filter %s, page size %d: %v; want %v", tc.name, size, ids, tc.want)
			}
		}
	}

	// Replacing labels changes what the filter finds.
	b, err := s.GetBattery(ctx, tenantA, "bike-1")
	check(t, "GetBattery", err)
	b.Labels = map[string]string{"fleet": "shop"}
	check(t, "UpdateBattery", ignore(s.UpdateBattery(ctx, tenantA, b, b.Version)))
	if ids, _ := listAll(t, s, tenantA, store.BatteryFilter{Labels: map[string]string{"site": "north"}}, 0); len(ids) != 0 {
		t.Errorf("after replacing labels, site=north finds %v; want none", ids)
	}
	if ids, _ := listAll(t, s, tenantA, store.BatteryFilter{Labels: map[string]string{"fleet": "shop"}}, 0); !slices.Equal(ids, []string{"bike-1", "ups-1"}) {
		t.Errorf("after replacing labels, fleet=shop finds %v; want [bike-1 ups-1]", ids)
	}

	for name, labels := range map[string]map[string]string{
		"upper-case key":  {"Fleet": "x"},
		"key with dot":    {"a.b": "x"},
		"empty key":       {"": "x"},
		"key digit first": {"1a": "x"},
		"long value":      {"a": strings.Repeat("x", store.MaxLabelValueChars+1)},
		"bad UTF-8":       {"a": "\xff"},
		"too many":        manyLabels(store.MaxLabels + 1),
	} {
		b := newBattery("bad-labels", builtinType)
		b.Labels = labels
		_, err := s.CreateBattery(ctx, tenantA, b, "")
		wantErr(t, "CreateBattery(labels "+name+")", err, store.ErrInvalidArgument)
	}
	ok := newBattery("max-labels", builtinType)
	ok.Labels = manyLabels(store.MaxLabels)
	ok.Labels["long"] = strings.Repeat("ü", store.MaxLabelValueChars)
	delete(ok.Labels, "k0")
	check(t, "CreateBattery(limits exactly)", ignore(s.CreateBattery(ctx, tenantA, ok, "")))
}

func manyLabels(n int) map[string]string {
	m := make(map[string]string, n)
	for i := range n {
		m[fmt.Sprintf("k%d", i)] = "v"
	}
	return m
}
