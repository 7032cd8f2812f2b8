document.querySelectorAll('table.sortable th').forEach(function(th){th.addEventListener('click',function(){
var t=th.closest('table'),b=t.tBodies[0],i=Array.prototype.indexOf.call(th.parentNode.children,th),d=th.dataset.dir==='a'?-1:1;
th.dataset.dir=d===1?'a':'d';var rows=Array.prototype.slice.call(b.rows);
rows.sort(function(r,s){var p=r.cells[i],q=s.cells[i],x=p.dataset.value,y=q.dataset.value;
if(x!==undefined&&y!==undefined){return d*(parseFloat(x)-parseFloat(y));}return d*p.textContent.localeCompare(q.textContent);});
rows.forEach(function(r){b.appendChild(r);});});});
