package manifest

import (
	"reflect"
	"sync"
)

// structKeys is jsonFields and requiredKeys of a struct type, computed
// once per type: a manifest has an object of the same type per tensor and
// per section.
type structKeys struct {
	fields   map[string]reflect.Type // read only
	required []string
}

var structKeysOf sync.Map // reflect.Type -> *structKeys

func keysOf(t reflect.Type) *structKeys {
	if k, ok := structKeysOf.Load(t); ok {
		return k.(*structKeys)
	}
	k, _ := structKeysOf.LoadOrStore(t, &structKeys{fields: jsonFields(t), required: requiredKeys(t)})
	return k.(*structKeys)
}
