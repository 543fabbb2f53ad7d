package sqlite

import (
	"path/filepath"
	"testing"

	"github.com/voltcast/voltcast/service/store"
	"github.com/voltcast/voltcast/service/store/storetest"
)

func openTemp(t testing.TB) store.Store {
	t.Helper()
	s, err := Open(t.Context(), filepath.Join(t.TempDir(), "voltcast.db"), nil)
	if err != nil {
		t.Fatalf("Open: %v", err)
	}
	t.Cleanup(func() {
		if err := s.Close(); err != nil {
			t.Errorf("Close: %v", err)
		}
	})
	return s
}

func TestContract(t *testing.T) {
	storetest.Run(t, openTemp)
}
