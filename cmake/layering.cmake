# The layering of DEVELOPERS.md ("Layout") made binding: a folder uses only what its row allows.
#
# Between top-level folders the compiler enforces it. Each folder's target exposes an include
# directory in which only that folder's own headers resolve (sprig_folder_include), so a target
# sees the headers of exactly what it links, and the links follow the table. Adding the source
# root instead would let any file include any other.
#
# Inside runtime/src/ the folders share one include root, so cmake/check_layering.py reads both
# tables and checks every #include of the tree against them, and every target's links against
# the top-level table (sprig_folder_target records them). It runs before anything is compiled
# (the target sprig_layering, which every library depends on) and as the test `layering`.

option(SPRIG_CHECK_LAYERING "Check every #include and link against DEVELOPERS.md's layout tables" ON)
if(SPRIG_CHECK_LAYERING)
  find_package(Python3 COMPONENTS Interpreter)
  if(NOT Python3_Interpreter_FOUND)
    message(FATAL_ERROR "The layering check needs Python 3 (or configure with -DSPRIG_CHECK_LAYERING=OFF)")
  endif()
  set(SPRIG_LAYERING_LINKS ${PROJECT_BINARY_DIR}/layering_links.txt)
  set(SPRIG_LAYERING_COMMAND ${Python3_EXECUTABLE} ${PROJECT_SOURCE_DIR}/cmake/check_layering.py
      ${PROJECT_SOURCE_DIR} --links ${SPRIG_LAYERING_LINKS})
endif()

# sprig_folder_include(<target> <folder>): an include directory, PUBLIC to <target>, in which
# "<folder>/x.h" resolves and nothing else of the source tree does. It is a folder of the build
# tree holding one symbolic link, <folder> -> the source folder, so headers are edited in place.
function(sprig_folder_include target folder)
  string(REPLACE "/" "_" name ${folder})
  set(root ${PROJECT_BINARY_DIR}/folders/${name})
  get_filename_component(parent ${root}/${folder} DIRECTORY)
  file(MAKE_DIRECTORY ${parent})
  file(CREATE_LINK ${PROJECT_SOURCE_DIR}/${folder} ${root}/${folder} SYMBOLIC)
  target_include_directories(${target} PUBLIC $<BUILD_INTERFACE:${root}>)
endfunction()

# sprig_folder_target(<target> <name>): <target> belongs to the table row <name> (a top-level
# folder, or runtime/include and runtime/src for the runtime's public and internal parts). Its
# links are checked against that row, and it is built only after the layering check.
function(sprig_folder_target target name)
  set_property(GLOBAL APPEND PROPERTY SPRIG_FOLDER_TARGETS ${target})
  set_property(TARGET ${target} PROPERTY SPRIG_FOLDER ${name})
endfunction()

# After every target is defined: writes each target's row and the rows of the targets it links
# (one line each) for the check, and makes every target wait for the check.
function(sprig_check_layering)
  if(NOT SPRIG_CHECK_LAYERING)
    return()
  endif()
  get_property(targets GLOBAL PROPERTY SPRIG_FOLDER_TARGETS)
  set(lines "")
  foreach(target ${targets})
    get_target_property(name ${target} SPRIG_FOLDER)
    get_target_property(links ${target} LINK_LIBRARIES)
    get_target_property(interface_links ${target} INTERFACE_LINK_LIBRARIES)
    set(linked_names "")
    foreach(link ${links} ${interface_links})
      if(TARGET ${link})
        get_target_property(linked ${link} SPRIG_FOLDER)
        if(linked)
          list(APPEND linked_names ${linked})
        endif()
      endif()
    endforeach()
    list(REMOVE_DUPLICATES linked_names)
    list(JOIN linked_names " " linked_names)
    string(APPEND lines "${name} ${target} ${linked_names}\n")
  endforeach()
  file(CONFIGURE OUTPUT ${SPRIG_LAYERING_LINKS} CONTENT "${lines}")

  set(sources "")
  foreach(folder runtime io converter bench tools tests samples)
    file(GLOB_RECURSE found CONFIGURE_DEPENDS ${PROJECT_SOURCE_DIR}/${folder}/*.h
         ${PROJECT_SOURCE_DIR}/${folder}/*.hpp ${PROJECT_SOURCE_DIR}/${folder}/*.cc
         ${PROJECT_SOURCE_DIR}/${folder}/*.cpp ${PROJECT_SOURCE_DIR}/${folder}/*.c)
    list(APPEND sources ${found})
  endforeach()
  set(stamp ${PROJECT_BINARY_DIR}/layering.stamp)
  add_custom_command(OUTPUT ${stamp}
    COMMAND ${SPRIG_LAYERING_COMMAND} --stamp ${stamp}
    DEPENDS ${PROJECT_SOURCE_DIR}/cmake/check_layering.py ${PROJECT_SOURCE_DIR}/DEVELOPERS.md
            ${SPRIG_LAYERING_LINKS} ${sources}
    COMMENT "Checking includes and links against DEVELOPERS.md's layout tables"
    VERBATIM)
  add_custom_target(sprig_layering DEPENDS ${stamp})
  foreach(target ${targets})
    get_target_property(type ${target} TYPE)
    if(NOT type STREQUAL "INTERFACE_LIBRARY")
      add_dependencies(${target} sprig_layering)
    endif()
  endforeach()
endfunction()
