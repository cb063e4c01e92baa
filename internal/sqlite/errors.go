package sqlite

import "errors"

// ErrSchemaNewer is returned (wrapped) by Open for a database whose schema
// a later version of the program migrated: this one does not know it.
var ErrSchemaNewer = errors.New("sqlite: the database's schema is newer than this program's")
