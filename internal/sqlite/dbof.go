package sqlite

// dbOf holds, for each package that keeps a DB in a store it exports
// without exposing the DB, how to find it.
var dbOf []func(store any) (*DB, bool)

// RegisterDBOf makes DBOf find the database under a store of the calling
// package: f returns it, and false for a value that is no such store. A
// public package calls it from init, so that its API names no type of this
// internal package while the tests and benchmarks of other packages of the
// module can still reach under its store (a full disk is set on the one
// writer connection). It is not safe to call after init.
func RegisterDBOf(f func(store any) (*DB, bool)) { dbOf = append(dbOf, f) }

// DBOf returns the database under store, for tests and benchmarks, and
// false when no registered package knows store.
func DBOf(store any) (*DB, bool) {
	for _, f := range dbOf {
		if db, ok := f(store); ok {
			return db, true
		}
	}
	return nil, false
}
