// SPDX-License-Identifier: MIT
// Fuzz target: the VOTable reader's BINARY and BINARY2 streams. The first byte picks the
// serialization (bit 0), one of the FIELD lists below (bits 1 to 6) and whether the array
// FIELDs are read (bit 7 clear) or left as unusable columns (set); the rest are the
// stream's bytes, base64-encoded here so that the fuzzer works on the rows, not on the
// base64. A clean InputError is the expected answer to any bytes; anything else is a bug.
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "rungcal/core/base64.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/table/votable_io.hpp"

namespace {

// Every datatype, scalars and arrays; Gaia epoch photometry's columns; arraysizes of every
// shape, with VALUES nulls.
const char* const kFieldLists[] = {
    R"(<FIELD name="l" datatype="long"/><FIELD name="c" datatype="char" arraysize="*"/>
<FIELD name="c8" datatype="char" arraysize="8"/><FIELD name="u" datatype="unicodeChar" arraysize="*"/>
<FIELD name="i" datatype="int"><VALUES null="-1"/></FIELD><FIELD name="s" datatype="short"/>
<FIELD name="b" datatype="unsignedByte"/><FIELD name="f" datatype="float"/>
<FIELD name="d" datatype="double"/><FIELD name="ok" datatype="boolean"/>
<FIELD name="bit" datatype="bit"/><FIELD name="t" datatype="double" arraysize="*"/>
<FIELD name="tf" datatype="float" arraysize="*"/><FIELD name="rej" datatype="boolean" arraysize="*"/>
<FIELD name="bits" datatype="bit" arraysize="*"/><FIELD name="cx" datatype="doubleComplex"/>)",
    R"(<FIELD name="source_id" datatype="long"/>
<FIELD name="g_transit_time" datatype="double" arraysize="*"/>
<FIELD name="g_transit_mag" datatype="double" arraysize="*"/>
<FIELD name="g_transit_flux_over_error" datatype="float" arraysize="*"/>
<FIELD name="variability_flag_g_reject" datatype="boolean" arraysize="*"/>)",
    R"(<FIELD name="a" datatype="int" arraysize="3x*"><VALUES null="0"/></FIELD>
<FIELD name="b" datatype="short" arraysize="2x2"/><FIELD name="c" datatype="double" arraysize="4*"/>
<FIELD name="d" datatype="bit" arraysize="11"/><FIELD name="e" datatype="unicodeChar" arraysize="3"/>
<FIELD name="f" datatype="char" arraysize="0"/><FIELD name="g" datatype="unsignedByte" arraysize="*"/>)",
};

// The array FIELDs of the lists above.
const std::vector<std::string> kArrayFields = {"t",
                                               "tf",
                                               "rej",
                                               "bits",
                                               "g_transit_time",
                                               "g_transit_mag",
                                               "g_transit_flux_over_error",
                                               "variability_flag_g_reject",
                                               "a",
                                               "b",
                                               "c",
                                               "d",
                                               "g"};

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size == 0) return 0;
  const bool binary2 = (data[0] & 1) != 0;
  const std::size_t list = (data[0] >> 1 & 0x3F) % (sizeof kFieldLists / sizeof kFieldLists[0]);
  const std::string stream(reinterpret_cast<const char*>(data) + 1, size - 1);
  const std::string form = binary2 ? "BINARY2" : "BINARY";
  const std::string text = std::string("<?xml version=\"1.0\"?>\n<VOTABLE><RESOURCE><TABLE>\n") +
                           kFieldLists[list] + "\n<DATA><" + form +
                           "><STREAM encoding=\"base64\">\n" + rungcal::encode_base64(stream) +
                           "\n</STREAM></" + form + "></DATA></TABLE></RESOURCE></VOTABLE>\n";
  // The array FIELDs are asked for by name, or (bit 7) left as unusable columns.
  const std::vector<std::string> arrays =
      (data[0] & 0x80) != 0 ? std::vector<std::string>{} : kArrayFields;
  try {
    (void)rungcal::parse_votable_table(text, "fuzz.vot", arrays);
  } catch (const rungcal::InputError&) {
  }
  return 0;
}
