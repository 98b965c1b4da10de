/* Small helpers for the forms; every form also works without them.
   - A file larger than the server accepts is refused before it is sent, with the limit named.
   - A section named in the address (#import) opens its collapsed parts. */
(function () {
  "use strict";

  function size(n) {
    return n >= 1048576 ? (n / 1048576).toFixed(0) + " MB" : Math.ceil(n / 1024) + " kB";
  }

  document.querySelectorAll('input[type="file"][data-max-bytes]').forEach(function (input) {
    var limit = parseInt(input.getAttribute("data-max-bytes"), 10);
    if (!limit) { return; }
    input.addEventListener("change", function () {
      var file = input.files && input.files[0];
      var note = input.parentNode.querySelector(".size-note");
      if (!note) {
        note = document.createElement("p");
        note.className = "field-errors size-note";
        note.setAttribute("role", "alert");
        input.parentNode.appendChild(note);
      }
      if (file && file.size > limit) {
        var text = "export file: " + file.name + " is " + size(file.size) + "; the limit is " + size(limit) + ".";
        input.setCustomValidity(text);
        note.textContent = text;
      } else {
        input.setCustomValidity("");
        note.textContent = "";
      }
    });
  });

  function openTarget() {
    if (!location.hash) { return; }
    var target = document.getElementById(location.hash.slice(1));
    if (target && target.tagName === "DETAILS") { target.open = true; }
  }
  window.addEventListener("hashchange", openTarget);
  openTarget();
})();
