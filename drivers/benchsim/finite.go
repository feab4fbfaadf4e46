package benchsim

import (
	"fmt"
	"math"
	"reflect"
	"sort"
	"strings"
)

// checkFinite refuses a NaN or an infinity anywhere in v (YAML's .nan and
// .inf decode into any number): no meter or intensifier has such a value,
// and every range check that follows would let a NaN through. The error
// names the key path ("$.intensifier.field_modes[0].conversion_factor").
func checkFinite(path string, v reflect.Value) error {
	switch v.Kind() {
	case reflect.Float32, reflect.Float64:
		if f := v.Float(); math.IsNaN(f) || math.IsInf(f, 0) {
			return bad(path, "%v is not a number a meter or an intensifier could have: give a finite value", f)
		}
	case reflect.Pointer, reflect.Interface:
		if !v.IsNil() {
			return checkFinite(path, v.Elem())
		}
	case reflect.Struct:
		t := v.Type()
		for i := 0; i < t.NumField(); i++ {
			f := t.Field(i)
			if !f.IsExported() {
				continue
			}
			name, _, _ := strings.Cut(f.Tag.Get("yaml"), ",")
			if name == "-" {
				continue
			}
			p := path
			if name != "" {
				p = path + "." + name
			}
			if err := checkFinite(p, v.Field(i)); err != nil {
				return err
			}
		}
	case reflect.Slice, reflect.Array:
		for i := 0; i < v.Len(); i++ {
			if err := checkFinite(fmt.Sprintf("%s[%d]", path, i), v.Index(i)); err != nil {
				return err
			}
		}
	case reflect.Map:
		keys := v.MapKeys()
		sort.Slice(keys, func(i, j int) bool { return fmt.Sprint(keys[i]) < fmt.Sprint(keys[j]) })
		for _, k := range keys {
			if err := checkFinite(fmt.Sprintf("%s.%v", path, k), v.MapIndex(k)); err != nil {
				return err
			}
		}
	}
	return nil
}
