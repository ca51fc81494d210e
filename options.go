package nightjar

import (
	"fmt"
	"reflect"
	"strconv"
	"strings"
)

// Option describes one field of Settings or Runtime as the command line
// and the benchmark sweeps name it: its `flag` and `help` tags.
type Option struct {
	Name  string // the option's name, such as "perplexity"
	Help  string // one line
	Topic string // the group it is listed under: input, neighbours, map, optimiser, running
	Kind  string // "string", "int", "float", "bool", "uint" or "list" (comma-separated strings)
	// Shaping is true for a field of Settings (it shapes the result and is
	// recorded in the manifest), false for one of Runtime.
	Shaping bool
}

// SettingOptions lists the options of Settings, in the order of its fields.
func SettingOptions() []Option { return optionsOf(reflect.TypeFor[Settings](), true) }

// RuntimeOptions lists the options of Runtime that a command line sets.
func RuntimeOptions() []Option { return optionsOf(reflect.TypeFor[Runtime](), false) }

func optionsOf(t reflect.Type, shaping bool) []Option {
	var out []Option
	for i := range t.NumField() {
		f := t.Field(i)
		name := f.Tag.Get("flag")
		if name == "" || name == "-" {
			continue
		}
		out = append(out, Option{Name: name, Help: f.Tag.Get("help"), Topic: f.Tag.Get("topic"), Kind: kindOf(f.Type), Shaping: shaping})
	}
	return out
}

func kindOf(t reflect.Type) string {
	switch t.Kind() {
	case reflect.String:
		return "string"
	case reflect.Int:
		return "int"
	case reflect.Float64:
		return "float"
	case reflect.Bool:
		return "bool"
	case reflect.Uint64:
		return "uint"
	case reflect.Slice:
		return "list"
	}
	panic("nightjar: option of unsupported type " + t.String())
}

// field returns the addressable field of the struct *p tagged flag:name.
func field(p any, name string) (reflect.Value, bool) {
	v := reflect.ValueOf(p).Elem()
	t := v.Type()
	for i := range t.NumField() {
		if t.Field(i).Tag.Get("flag") == name {
			return v.Field(i), true
		}
	}
	return reflect.Value{}, false
}

// Set sets the option called name (an Option.Name of SettingOptions) from
// its text form. A list option appends the comma-separated values, so it
// may be given more than once. Errors are *SettingError.
func (s *Settings) Set(name, value string) error { return set(s, name, value) }

// Get returns the option called name in the text form Set reads.
func (s *Settings) Get(name string) (string, error) { return get(s, name) }

// Set sets the runtime option called name from its text form.
func (r *Runtime) Set(name, value string) error { return set(r, name, value) }

// Get returns the runtime option called name in the text form Set reads.
func (r *Runtime) Get(name string) (string, error) { return get(r, name) }

func set(p any, name, value string) error {
	f, ok := field(p, name)
	if !ok {
		return &SettingError{Name: name, Msg: "no such option"}
	}
	bad := func(what string) error {
		return &SettingError{Name: name, Msg: fmt.Sprintf("want %s, got %q", what, value)}
	}
	switch f.Kind() {
	case reflect.String:
		f.SetString(value)
	case reflect.Int:
		n, err := strconv.Atoi(strings.TrimSpace(value))
		if err != nil {
			return bad("an integer")
		}
		f.SetInt(int64(n))
	case reflect.Float64:
		x, err := strconv.ParseFloat(strings.TrimSpace(value), 64)
		if err != nil {
			return bad("a number")
		}
		f.SetFloat(x)
	case reflect.Bool:
		b, err := strconv.ParseBool(strings.TrimSpace(value))
		if err != nil {
			return bad("true or false")
		}
		f.SetBool(b)
	case reflect.Uint64:
		n, err := strconv.ParseUint(strings.TrimSpace(value), 10, 64)
		if err != nil {
			return bad("a whole number ≥ 0")
		}
		f.SetUint(n)
	case reflect.Slice:
		f.Set(reflect.AppendSlice(f, reflect.ValueOf(trimList(value))))
	}
	return nil
}

func get(p any, name string) (string, error) {
	f, ok := field(p, name)
	if !ok {
		return "", &SettingError{Name: name, Msg: "no such option"}
	}
	switch f.Kind() {
	case reflect.String:
		return f.String(), nil
	case reflect.Int:
		return strconv.FormatInt(f.Int(), 10), nil
	case reflect.Float64:
		return strconv.FormatFloat(f.Float(), 'g', -1, 64), nil
	case reflect.Bool:
		return strconv.FormatBool(f.Bool()), nil
	case reflect.Uint64:
		return strconv.FormatUint(f.Uint(), 10), nil
	default:
		return strings.Join(f.Interface().([]string), ","), nil
	}
}
