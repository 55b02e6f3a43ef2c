# pitchwire-corpus: writes the synthetic voice corpus (WAV files, 1 ms F0 truth, manifest).
#   pitchwire-corpus OUTDIR [--quick] [--seed N]
add_executable(pitchwire-corpus ${CMAKE_CURRENT_SOURCE_DIR}/make_corpus.cpp)
target_link_libraries(pitchwire-corpus PRIVATE pitchwire::dsp pitchwire_options PkgConfig::SNDFILE)
