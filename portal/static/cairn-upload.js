// Sends the upload form with a progress bar; without JavaScript the form posts as usual.
(function () {
  "use strict";
  var form = document.getElementById("upload-form");
  if (!form || !window.FormData || !window.XMLHttpRequest) { return; }
  var bar = document.getElementById("upload-bar");
  var note = document.getElementById("upload-note");
  form.addEventListener("submit", function (event) {
    event.preventDefault();
    var data = new FormData();
    Array.prototype.forEach.call(form.elements, function (el) {
      if (!el.name || el.type === "file" || el.type === "submit") { return; }
      if ((el.type === "radio" || el.type === "checkbox") && !el.checked) { return; }
      data.append(el.name, el.value);
    });
    var archive = form.querySelector("input[name=archive]").files;
    var files = form.querySelector("input[name=files]").files;
    if (archive.length) { data.append("archive", archive[0]); }
    Array.prototype.forEach.call(files, function (file) {
      data.append("paths", file.webkitRelativePath || file.name);
    });
    Array.prototype.forEach.call(files, function (file) { data.append("files", file); });
    var xhr = new XMLHttpRequest();
    xhr.open("POST", form.action);
    xhr.setRequestHeader("Accept", "application/json");
    xhr.upload.addEventListener("progress", function (e) {
      if (!e.lengthComputable) { return; }
      var percent = Math.round(100 * e.loaded / e.total);
      bar.firstElementChild.style.width = percent + "%";
      bar.setAttribute("aria-valuenow", percent);
      note.textContent = (e.loaded / 1048576).toFixed(1) + " of " +
        (e.total / 1048576).toFixed(1) + " MB sent";
    });
    xhr.addEventListener("load", function () {
      var reply = {};
      try { reply = JSON.parse(xhr.responseText); } catch (err) { reply = {}; }
      if (xhr.status === 201 && reply.url) { window.location = reply.url; return; }
      note.textContent = reply.error || ("The upload failed (HTTP " + xhr.status + ").");
      note.className = "error-text";
    });
    xhr.addEventListener("error", function () {
      note.textContent = "The connection broke off. Nothing was stored; send the files again.";
      note.className = "error-text";
    });
    note.textContent = "sending …";
    xhr.send(data);
  });
}());
