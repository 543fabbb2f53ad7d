package sqlstore

import (
	"context"
	"crypto/hmac"
	"crypto/rand"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"maps"
	"slices"
	"strings"

	"github.com/voltcast/voltcast/service/store"
)

// Page tokens are base64url(payload ‖ tag) where payload is the JSON of a [cursor]
// and tag the first tokenTagBytes of HMAC-SHA256 over it with a key stored in the
// database. Every replica on the same database shares the key, so any replica accepts
// any replica's tokens, and a client cannot forge or alter one.
const (
	tokenKeyName   = "page_token_key"
	tokenKeyBytes  = 32
	tokenTagBytes  = 16
	maxTokenLength = 2048
)

// cursor is the content of a page token: where the previous page ended, and what it
// was a page of.
type cursor struct {
	List   string `json:"l"`
	Tenant string `json:"t"`
	Filter string `json:"f,omitempty"`
	After  string `json:"a"`
	// AfterTime is the create time (microseconds) of the last item, for lists ordered
	// by time.
	AfterTime int64 `json:"at,omitempty"`
}

// loadTokenKey returns the database's page-token key, creating it on first use.
func loadTokenKey(ctx context.Context, db db) ([]byte, error) {
	key := make([]byte, tokenKeyBytes)
	if _, err := rand.Read(key); err != nil {
		return nil, fmt.Errorf("make page token key: %w", err)
	}
	if _, err := db.ExecContext(ctx,
		`INSERT INTO store_meta (key, value) VALUES ($1, $2) ON CONFLICT (key) DO NOTHING`,
		tokenKeyName, key); err != nil {
		return nil, fmt.Errorf("store page token key: %w", err)
	}
	var stored []byte
	if err := db.QueryRowContext(ctx, `SELECT value FROM store_meta WHERE key = $1`, tokenKeyName).Scan(&stored); err != nil {
		return nil, fmt.Errorf("load page token key: %w", err)
	}
	if len(stored) != tokenKeyBytes {
		return nil, fmt.Errorf("load page token key: %d bytes, want %d", len(stored), tokenKeyBytes)
	}
	return stored, nil
}

func (s *Store) tag(payload []byte) []byte {
	m := hmac.New(sha256.New, s.tokenKey)
	m.Write(payload)
	return m.Sum(nil)[:tokenTagBytes]
}

// encodeToken returns the token for c.
func (s *Store) encodeToken(c cursor) string {
	payload, err := json.Marshal(c)
	if err != nil {
		panic("sqlstore: marshal cursor: " + err.Error()) // a struct of strings and ints always marshals
	}
	return base64.RawURLEncoding.EncodeToString(append(payload, s.tag(payload)...))
}

// decodeToken returns the cursor of token, checking that it was issued by this store
// for the same list, tenant and filter. The empty token decodes as the zero cursor.
func (s *Store) decodeToken(token, list, tenant, filter string) (cursor, error) {
	if token == "" {
		return cursor{}, nil
	}
	if len(token) > maxTokenLength {
		return cursor{}, fmt.Errorf("%w: too long", store.ErrInvalidPageToken)
	}
	raw, err := base64.RawURLEncoding.Strict().DecodeString(token)
	if err != nil || len(raw) <= tokenTagBytes {
		return cursor{}, fmt.Errorf("%w: malformed", store.ErrInvalidPageToken)
	}
	payload, tag := raw[:len(raw)-tokenTagBytes], raw[len(raw)-tokenTagBytes:]
	if !hmac.Equal(tag, s.tag(payload)) {
		return cursor{}, fmt.Errorf("%w: not issued by this store or altered", store.ErrInvalidPageToken)
	}
	var c cursor
	if err := json.Unmarshal(payload, &c); err != nil {
		return cursor{}, fmt.Errorf("%w: malformed", store.ErrInvalidPageToken)
	}
	if c.List != list || c.Tenant != tenant || c.Filter != filter {
		return cursor{}, fmt.Errorf("%w: issued for a different list, tenant or filter", store.ErrInvalidPageToken)
	}
	return c, nil
}

// filterKey returns a short digest that identifies a battery filter.
func filterKey(f store.BatteryFilter) string {
	if f.TypeName == "" && len(f.Labels) == 0 {
		return ""
	}
	var b strings.Builder
	b.WriteString(f.TypeName)
	for _, k := range slices.Sorted(maps.Keys(f.Labels)) {
		// NUL cannot occur in valid keys or values, so the encoding is unambiguous.
		b.WriteString("\x00" + k + "\x00" + f.Labels[k])
	}
	sum := sha256.Sum256([]byte(b.String()))
	return hex.EncodeToString(sum[:12])
}
