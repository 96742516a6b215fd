// The Python module `residue` (pybind11): the same extraction and scoring the command line runs,
// for notebooks and pipelines (docs/python.md).
//
//   import residue
//   names, values, facts = residue.features("photo.jpg")   # values: numpy float64 array
//   model = residue.Model.load("model.json")
//   record = model.score(open("photo.jpg", "rb").read())   # the scan record as a dict
//   records = model.score_many(paths, jobs=4)              # errors stay records, as in scan
//
// Records go through the same JSON writer as `residue scan` and come back through Python's json
// module, so a record here and a line of `scan` are the same values. The GIL is released while
// images are decoded and scored.
#include <pybind11/eval.h>
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include <limits>
#include <memory>
#include <string>
#include <thread>
#include <vector>

#include "residue/detector/scoring/record.hpp"
#include "residue/detector/scoring/scan.hpp"
#include "residue/features/decode.hpp"
#include "residue/features/extract.hpp"
#include "residue/features/surprise.hpp"
#include "residue/training/batch.hpp"
#include "residue/training/model.hpp"

namespace py = pybind11;

namespace {

using residue::Error;
using residue::ExtractOptions;
using residue::ScanSettings;

// residue.Error, raised with the record's error code (`truncated`, `not-an-image`, ...).
py::object& error_class() {
  static py::object cls;
  return cls;
}

[[noreturn]] void raise_error(const std::string& code, const std::string& message) {
  const py::object e = error_class()(code, message);
  PyErr_SetObject(error_class().ptr(), e.ptr());
  throw py::error_already_set();
}

[[noreturn]] void raise_error(const Error& error) {
  raise_error(std::string(residue::error_code_name(error.code)), error.message);
}

// Runs `work` with the GIL released, so that other Python threads go on meanwhile.
template <typename Work>
auto without_gil(Work&& work) {
  const py::gil_scoped_release unlocked;
  return work();
}

py::object to_python(const nlohmann::ordered_json& record) {
  return py::module_::import("json").attr("loads")(residue::record_line(record));
}

ExtractOptions extract_options(double max_file_mb, std::uint64_t max_pixels, int min_window) {
  ExtractOptions o;
  o.limits.max_file_bytes = static_cast<std::uint64_t>(max_file_mb * 1024 * 1024);
  o.limits.max_pixels = max_pixels;
  o.windows.min_size = min_window;
  return o;
}

// A path (str or os.PathLike, as bytes of the file system's encoding) or the image's bytes.
struct Source {
  bool is_path = false;
  std::string path;   // the path's bytes, or the name to echo for bytes
  std::string bytes;  // the image, when given as bytes
};

Source source_of(const py::object& source) {
  Source s;
  if (!py::isinstance<py::str>(source) && PyObject_CheckBuffer(source.ptr()) != 0) {  // bytes-like
    s.bytes = py::module_::import("builtins").attr("bytes")(source).cast<std::string>();
    s.path = "-";
    return s;
  }
  // os.fsencode gives the exact bytes of the name, also for names that are not UTF-8.
  s.path = py::bytes(py::module_::import("os").attr("fsencode")(source)).cast<std::string>();
  s.is_path = true;
  return s;
}

// The bytes of `s`, read under the limits, or raised as residue.Error.
std::vector<std::uint8_t> bytes_of(const Source& s, const ExtractOptions& options) {
  if (!s.is_path) return {s.bytes.begin(), s.bytes.end()};
  auto read = without_gil([&] { return residue::read_file(s.path, options.limits); });
  if (!read) raise_error(read.error());
  return std::move(*read);
}

py::tuple features(const py::object& source, double max_file_mb, std::uint64_t max_pixels, int min_window) {
  const ExtractOptions options = extract_options(max_file_mb, max_pixels, min_window);
  const Source s = source_of(source);
  const std::vector<std::uint8_t> bytes = bytes_of(s, options);
  auto extraction = without_gil([&] { return residue::extract_bytes(bytes, options); });
  if (!extraction) raise_error(extraction.error());
  const auto& values = extraction->features.values;
  py::array_t<double> array(static_cast<py::ssize_t>(values.size()));
  std::copy(values.begin(), values.end(), array.mutable_data());
  // The coding surprise's NLL, expected cost and gap need a model's camera pixel model: NaN here,
  // as `residue features` prints null.
  const auto& names = residue::feature_names();
  for (size_t i = 0; i < names.size(); ++i) {
    if (residue::is_model_value(names[i])) array.mutable_data()[i] = std::numeric_limits<double>::quiet_NaN();
  }
  nlohmann::ordered_json facts = residue::features_record(s.path, *extraction);
  facts.erase("features");  // they are the array
  return py::make_tuple(residue::feature_names(), array, to_python(facts));
}

class PyModel {
 public:
  static PyModel load(const py::object& path, double max_file_mb, std::uint64_t max_pixels, int min_window) {
    const std::string name = py::bytes(py::module_::import("os").attr("fsencode")(path)).cast<std::string>();
    auto loaded = residue::load_model(name);
    if (!loaded)
      raise_error(std::string(residue::error_code_name(loaded.error().code)), loaded.error().message);
    PyModel m;
    m.model_ = std::make_shared<const residue::Model>(std::move(*loaded));
    m.settings_.extract = extract_options(max_file_mb, max_pixels, min_window);
    return m;
  }

  [[nodiscard]] std::string id() const { return model_->id; }

  // What GET /v1/model answers: id, schema, thresholds, provenance, without the weights.
  [[nodiscard]] py::object info() const {
    nlohmann::ordered_json j = residue::model_to_json(*model_);
    j.erase("scaler");
    j.erase("linear");
    j["advisory"] = residue::kAdvisoryNotice;
    return to_python(j);
  }

  [[nodiscard]] py::object score(const py::object& source, const std::optional<std::string>& name,
                                 std::optional<double> prior, bool with_features) const {
    const Source s = source_of(source);
    ScanSettings settings = settings_;
    if (prior) settings.prior = *prior;
    settings.with_features = with_features;
    const nlohmann::ordered_json record = without_gil([&] {
      if (s.is_path) return residue::scan_file(s.path, *model_, settings);
      return residue::scan_bytes(
          name.value_or(s.path),
          std::span(reinterpret_cast<const std::uint8_t*>(s.bytes.data()), s.bytes.size()), *model_,
          settings);
    });
    if (record.contains("error")) {
      raise_error(record["error"]["code"].get<std::string>(), record["error"]["message"].get<std::string>());
    }
    return to_python(record);
  }

  [[nodiscard]] py::list score_many(const py::iterable& paths, int jobs, std::optional<double> prior,
                                    bool with_features) const {
    std::vector<std::string> names;
    for (const auto& p : paths) {
      names.push_back(py::bytes(py::module_::import("os").attr("fsencode")(p)).cast<std::string>());
    }
    ScanSettings settings = settings_;
    if (prior) settings.prior = *prior;
    settings.with_features = with_features;
    if (jobs <= 0) jobs = static_cast<int>(std::max(1U, std::thread::hardware_concurrency()));
    std::vector<nlohmann::ordered_json> records(names.size());
    {
      py::gil_scoped_release unlocked;
      residue::ordered_parallel<nlohmann::ordered_json>(
          names.size(), jobs, [&](size_t i) { return residue::scan_file(names[i], *model_, settings); },
          [&](size_t i, nlohmann::ordered_json& r) { records[i] = std::move(r); });
    }
    py::list out;
    for (const auto& r : records) out.append(to_python(r));
    return out;
  }

 private:
  std::shared_ptr<const residue::Model> model_;
  ScanSettings settings_;
};

}  // namespace

PYBIND11_MODULE(residue, m) {
  m.doc() =
      "residue: screens images for traces of generative models. Scores are advisory evidence, not proof "
      "(residue.ADVISORY).";
  m.attr("__version__") = "0.1.0";
  m.attr("ADVISORY") = residue::kAdvisoryNotice;
  py::dict scope;
  py::exec(R"(
class Error(ValueError):
    """An image or model residue could not use; .code is the record's error code
    (truncated, not-an-image, too-large, too-small, corrupt, unsupported, unreadable, ...)."""
    def __init__(self, code, message):
        super().__init__(f"{code}: {message}")
        self.code = code
        self.message = message
)",
           scope);
  error_class() = scope["Error"];
  error_class().attr("__module__") = "residue";
  m.attr("Error") = error_class();

  // The command line's defaults (DecodeLimits, WindowPolicy).
  const ExtractOptions defaults;
  const double kFileMb = static_cast<double>(defaults.limits.max_file_bytes) / (1024.0 * 1024.0);
  const std::uint64_t kPixels = defaults.limits.max_pixels;
  const int kMinWindow = defaults.windows.min_size;
  m.def("feature_names", &residue::feature_names, "The names of the feature vector's values, in order.");
  m.def("features", &features, py::arg("source"), py::kw_only(), py::arg("max_file_mb") = kFileMb,
        py::arg("max_pixels") = kPixels, py::arg("min_window") = kMinWindow,
        "(names, values, facts) of an image given as a path or as bytes: the values as a numpy array aligned "
        "with names, the facts as `residue features` writes them. Raises residue.Error.");
  py::class_<PyModel>(m, "Model", "A trained model file (residue train), ready to score images.")
      .def_static("load", &PyModel::load, py::arg("path"), py::kw_only(), py::arg("max_file_mb") = kFileMb,
                  py::arg("max_pixels") = kPixels, py::arg("min_window") = kMinWindow,
                  "Loads a model file; raises residue.Error when it is not a usable model.")
      .def_property_readonly("id", &PyModel::id)
      .def("info", &PyModel::info, "Id, schema, thresholds and provenance (as GET /v1/model answers).")
      .def("score", &PyModel::score, py::arg("source"), py::kw_only(), py::arg("name") = py::none(),
           py::arg("prior") = py::none(), py::arg("with_features") = false,
           "The scan record (a dict) of an image given as a path or as bytes (`name` is echoed as its path); "
           "with_features=True adds its feature vector as `residue scan --with-features` does. "
           "Raises residue.Error with the record's error code when it cannot be scored.")
      .def("score_many", &PyModel::score_many, py::arg("paths"), py::kw_only(), py::arg("jobs") = 0,
           py::arg("prior") = py::none(), py::arg("with_features") = false,
           "Scan records of many files, in order, with `jobs` threads (0: one per core). As in `residue "
           "scan`, a file that cannot be scored gets an error record and the batch goes on.");
}
