package sqlite

import (
	"path/filepath"
	"testing"

	"github.com/voltcast/voltcast/service/store"
	"github.com/voltcast/voltcast/service/store/storetest"
)

func openTemp(t testing.TB) store.Store {
	t.Helper()
	return openPath(t, filepath.Join(t.TempDir(), "voltcast.db"))
}

// openPath opens the store at path and closes it at cleanup.
func openPath(t testing.TB, path string) store.Store {
	t.Helper()
	s, err := Open(t.Context(), path, nil)
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

// TestReplicas runs two stores on one file, as two processes would.
func TestReplicas(t *testing.T) {
	storetest.ReplicasTest(t, func(t testing.TB) (store.Store, store.Store) {
		path := filepath.Join(t.TempDir(), "shared.db")
		return openPath(t, path), openPath(t, path)
	})
}

func BenchmarkPutState(b *testing.B) {
	storetest.PutStateBench(b, openTemp)
}
